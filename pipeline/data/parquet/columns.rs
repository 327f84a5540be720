//! Arrow arrays decoded into tabcard's typed columns, batch by batch ([`Builder`]): the column
//! types tabcard reads, nulls, and text levels that keep one code per level across chunks.

use arrow::array::{Array, ArrayRef, AsArray};
use arrow::datatypes::*;
use std::collections::HashMap;
use std::path::Path;

use crate::data::table::{Column, ColumnValues, NULL_CODE};
use crate::error::{Error, Result};

/// Rows per decoded chunk in [`ParquetSource::for_each_chunk`] (and per Arrow batch).
pub const CHUNK_ROWS: usize = 65_536;

/// One column being filled batch by batch.
pub(super) struct Builder {
    name: String,
    source_type: String,
    values: ColumnValues,
    /// Validity per row, kept only once a null has been seen (empty before).
    valid: Vec<bool>,
    has_null: bool,
    /// Rows appended so far, and the row the values held now start at (chunked reads).
    rows: usize,
    start: usize,
    level_index: HashMap<String, u32>,
}

pub(super) fn supported(dt: &DataType) -> bool {
    use DataType::*;
    match dt {
        Float16 | Float32 | Float64 | Int8 | Int16 | Int32 | Int64 | UInt8 | UInt16 | UInt32 | UInt64 | Boolean | Utf8 | LargeUtf8
        | Utf8View => true,
        Dictionary(_, value) => matches!(value.as_ref(), Utf8 | LargeUtf8 | Utf8View),
        _ => false,
    }
}

pub(super) fn empty_values(dt: &DataType) -> ColumnValues {
    use DataType::*;
    match dt {
        Float16 | Float32 => ColumnValues::Float32(Vec::new()),
        Float64 => ColumnValues::Float(Vec::new()),
        Int8 | Int16 | Int32 | Int64 | UInt8 | UInt16 | UInt32 | UInt64 => ColumnValues::Int(Vec::new()),
        Boolean => ColumnValues::Bool(Vec::new()),
        _ => ColumnValues::Text { codes: Vec::new(), levels: Vec::new() },
    }
}

impl Builder {
    pub(super) fn new(field: &Field) -> Self {
        Builder {
            name: field.name().clone(),
            source_type: field.data_type().to_string(),
            values: empty_values(field.data_type()),
            valid: Vec::new(),
            has_null: false,
            rows: 0,
            start: 0,
            level_index: HashMap::new(),
        }
    }

    /// The rows held since the last take, as a column; the builder carries on empty (its text
    /// levels go with the column and come back through [`Builder::restore`]).
    pub(super) fn take(&mut self) -> Column {
        let values = match &mut self.values {
            ColumnValues::Float(v) => ColumnValues::Float(std::mem::take(v)),
            ColumnValues::Float32(v) => ColumnValues::Float32(std::mem::take(v)),
            ColumnValues::Int(v) => ColumnValues::Int(std::mem::take(v)),
            ColumnValues::Bool(v) => ColumnValues::Bool(std::mem::take(v)),
            ColumnValues::Text { codes, levels } => ColumnValues::Text { codes: std::mem::take(codes), levels: std::mem::take(levels) },
        };
        let valid = std::mem::take(&mut self.has_null).then(|| std::mem::take(&mut self.valid));
        self.start = self.rows;
        Column { name: self.name.clone(), source_type: self.source_type.clone(), values, valid }
    }

    pub(super) fn restore(&mut self, col: Column) {
        if let (ColumnValues::Text { levels, .. }, ColumnValues::Text { levels: back, .. }) = (&mut self.values, col.values) {
            *levels = back;
        }
    }

    fn push_text(&mut self, value: Option<&str>) {
        let ColumnValues::Text { codes, levels } = &mut self.values else { return };
        match value {
            None => codes.push(NULL_CODE),
            Some(s) => {
                let code = match self.level_index.get(s) {
                    Some(&c) => c,
                    None => {
                        let c = levels.len() as u32;
                        levels.push(s.to_string());
                        self.level_index.insert(s.to_string(), c);
                        c
                    }
                };
                codes.push(code);
            }
        }
    }

    pub(super) fn append(&mut self, array: &ArrayRef, file: &Path) -> Result<()> {
        let n = array.len();
        let nulls = array.logical_nulls();
        let is_valid = |i: usize| nulls.as_ref().is_none_or(|b| b.is_valid(i));
        let first_row = self.rows;
        self.rows += n;
        if !self.has_null && nulls.as_ref().is_some_and(|b| b.null_count() > 0) {
            self.has_null = true;
            self.valid = vec![true; first_row - self.start];
        }
        if self.has_null {
            self.valid.extend((0..n).map(is_valid));
        }
        macro_rules! floats {
            ($t:ty) => {{
                let a = array.as_primitive::<$t>();
                if let ColumnValues::Float(out) = &mut self.values {
                    out.extend((0..n).map(|i| if is_valid(i) { f64::from(a.value(i)) } else { 0.0 }));
                }
            }};
        }
        macro_rules! ints {
            ($t:ty) => {{
                let a = array.as_primitive::<$t>();
                if let ColumnValues::Int(out) = &mut self.values {
                    for i in 0..n {
                        let x = if is_valid(i) {
                            i64::try_from(a.value(i)).map_err(|_| {
                                Error::data(
                                    file,
                                    Some(&self.name),
                                    format!("row {}: value {} does not fit a 64-bit signed integer", first_row + i, a.value(i)),
                                )
                            })?
                        } else {
                            0
                        };
                        out.push(x);
                    }
                }
            }};
        }
        match array.data_type() {
            DataType::Float16 => {
                let a = array.as_primitive::<Float16Type>();
                if let ColumnValues::Float32(out) = &mut self.values {
                    out.extend((0..n).map(|i| if is_valid(i) { a.value(i).to_f32() } else { 0.0 }));
                }
            }
            DataType::Float32 => {
                let a = array.as_primitive::<Float32Type>();
                if let ColumnValues::Float32(out) = &mut self.values {
                    out.extend((0..n).map(|i| if is_valid(i) { a.value(i) } else { 0.0 }));
                }
            }
            DataType::Float64 => floats!(Float64Type),
            DataType::Int8 => ints!(Int8Type),
            DataType::Int16 => ints!(Int16Type),
            DataType::Int32 => ints!(Int32Type),
            DataType::Int64 => ints!(Int64Type),
            DataType::UInt8 => ints!(UInt8Type),
            DataType::UInt16 => ints!(UInt16Type),
            DataType::UInt32 => ints!(UInt32Type),
            DataType::UInt64 => ints!(UInt64Type),
            DataType::Boolean => {
                let a = array.as_boolean();
                if let ColumnValues::Bool(out) = &mut self.values {
                    out.extend((0..n).map(|i| is_valid(i) && a.value(i)));
                }
            }
            DataType::Utf8 => {
                let a = array.as_string::<i32>();
                for i in 0..n {
                    self.push_text(is_valid(i).then(|| a.value(i)));
                }
            }
            DataType::LargeUtf8 => {
                let a = array.as_string::<i64>();
                for i in 0..n {
                    self.push_text(is_valid(i).then(|| a.value(i)));
                }
            }
            DataType::Utf8View => {
                let a = array.as_string_view();
                for i in 0..n {
                    self.push_text(is_valid(i).then(|| a.value(i)));
                }
            }
            DataType::Dictionary(_, _) => {
                let plain = arrow::compute::cast(array, &DataType::Utf8)
                    .map_err(|e| Error::data(file, Some(&self.name), format!("cannot decode dictionary strings: {e}")))?;
                let a = plain.as_string::<i32>();
                for i in 0..n {
                    self.push_text(is_valid(i).then(|| a.value(i)));
                }
            }
            other => {
                return Err(Error::data(file, Some(&self.name), format!("unsupported type {other}")));
            }
        }
        Ok(())
    }

    pub(super) fn finish(self) -> Column {
        Column { name: self.name, source_type: self.source_type, values: self.values, valid: self.has_null.then_some(self.valid) }
    }
}
