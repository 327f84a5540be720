//! Reading a Parquet file into a [`Table`] with the `parquet` crate's Arrow reader. Supported column
//! types: floats, integers, booleans, strings and dictionary-encoded strings, all with nulls; any
//! other type is an error naming the column and its type. One of the two places that touch the
//! outside world (the other is `store.rs`).

use arrow::array::{Array, ArrayRef, AsArray};
use arrow::datatypes::*;
use parquet::arrow::arrow_reader::{ArrowReaderMetadata, ParquetRecordBatchReaderBuilder};
use std::collections::HashMap;
use std::path::Path;

use super::table::{Column, ColumnValues, Table, NULL_CODE};
use crate::error::{Error, Result};

/// One column being filled batch by batch.
struct Builder {
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

fn supported(dt: &DataType) -> bool {
    use DataType::*;
    match dt {
        Float16 | Float32 | Float64 | Int8 | Int16 | Int32 | Int64 | UInt8 | UInt16 | UInt32 | UInt64 | Boolean | Utf8 | LargeUtf8
        | Utf8View => true,
        Dictionary(_, value) => matches!(value.as_ref(), Utf8 | LargeUtf8 | Utf8View),
        _ => false,
    }
}

fn empty_values(dt: &DataType) -> ColumnValues {
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
    fn new(field: &Field) -> Self {
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
    fn take(&mut self) -> Column {
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

    fn restore(&mut self, col: Column) {
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

    fn append(&mut self, array: &ArrayRef, file: &Path) -> Result<()> {
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

    fn finish(self) -> Column {
        Column { name: self.name, source_type: self.source_type, values: self.values, valid: self.has_null.then_some(self.valid) }
    }
}

/// Reads every column of a Parquet file, straight from the file: the encoded bytes are never
/// held in memory beside the decoded table.
pub fn read_table(path: &Path) -> Result<Table> {
    let open = || open_regular(path);
    read_from(&open, path)
}

/// Reads only the named columns (in file order) across every row group. The columns are
/// identical, value for value, to the same columns of [`read_table`].
pub fn read_columns(path: &Path, names: &[&str]) -> Result<Table> {
    ParquetSource::open(path)?.read(names)
}

/// The column names of a Parquet file in order, without decoding any value.
pub fn column_names(path: &Path) -> Result<Vec<String>> {
    let file = open_regular(path)?;
    let builder =
        ParquetRecordBatchReaderBuilder::try_new(file).map_err(|e| Error::data(path, None, format!("not a readable Parquet file: {e}")))?;
    Ok(builder.schema().fields().iter().map(|f| f.name().clone()).collect())
}

/// Reads a Parquet file held in memory; `name` is only used in error messages.
pub fn read_table_from_bytes(bytes: Vec<u8>, name: &Path) -> Result<Table> {
    let bytes = bytes::Bytes::from(bytes);
    read_from(&|| Ok(bytes.clone()), name)
}

/// A Parquet file opened once and checked once (metadata offsets, dictionary page sizes, column
/// types, unique names), then read a few columns at a time, or a few rows at a time, without ever
/// holding the whole decoded table. The file stays open, so a file replaced by rename between two
/// reads is still read as it was; a file changed in place (length or modification time) is an
/// error, never silently mixed.
pub struct ParquetSource {
    path: std::path::PathBuf,
    file: std::fs::File,
    /// The footer, parsed once: every later read reuses it, so a read of a few columns costs the
    /// same on a 10,000-column file as on a 10-column one.
    metadata: ArrowReaderMetadata,
    fields: Vec<Field>,
    /// Column name -> position in the file, so that looking a column up costs the same at any width.
    index: HashMap<String, usize>,
    rows: usize,
    identity: (u64, Option<std::time::SystemTime>),
}

/// Rows per decoded chunk in [`ParquetSource::for_each_chunk`] (and per Arrow batch).
pub const CHUNK_ROWS: usize = 65_536;

fn identity_of(file: &std::fs::File) -> (u64, Option<std::time::SystemTime>) {
    file.metadata().map(|m| (m.len(), m.modified().ok())).unwrap_or((0, None))
}

impl ParquetSource {
    pub fn open(path: &Path) -> Result<Self> {
        let file = open_regular(path)?;
        let identity = identity_of(&file);
        let clone = || file.try_clone().map_err(|e| Error::io(path, "open the data file", e));
        let (metadata, fields, rows) = guarded(path, || {
            let builder = checked_builder(&clone, path)?;
            let rows = usize::try_from(builder.metadata().file_metadata().num_rows())
                .map_err(|_| Error::data(path, None, "corrupt Parquet metadata: negative row count"))?;
            let metadata = ArrowReaderMetadata::try_new(builder.metadata().clone(), Default::default())
                .map_err(|e| Error::data(path, None, format!("not a readable Parquet file: {e}")))?;
            Ok((metadata, builder.schema().fields().iter().map(|f| f.as_ref().clone()).collect::<Vec<_>>(), rows))
        })?;
        let index = fields.iter().enumerate().map(|(i, f)| (f.name().clone(), i)).collect();
        Ok(ParquetSource { path: path.to_path_buf(), file, metadata, fields, index, rows, identity })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// SHA-256 of the file's bytes, read through the handle every later read uses, and its length.
    pub fn file_sha256(&self) -> Result<(String, u64)> {
        use std::io::Seek;
        let io = |e| Error::io(&self.path, "read the data file", e);
        let mut file = self.file.try_clone().map_err(io)?;
        file.rewind().map_err(io)?;
        let (digest, bytes) = crate::fingerprint::reader_sha256(file, &self.path)?;
        if bytes != self.identity.0 {
            return Err(self.changed());
        }
        Ok((digest, bytes))
    }

    /// Rows as the file's metadata declares them (every read checks it gets exactly these).
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// Column names in file order.
    pub fn names(&self) -> Vec<String> {
        self.fields.iter().map(|f| f.name().clone()).collect()
    }

    /// Whether the column holds strings (plain or dictionary-encoded).
    pub fn is_text(&self, name: &str) -> bool {
        self.index.get(name).is_some_and(|&i| matches!(empty_values(self.fields[i].data_type()), ColumnValues::Text { .. }))
    }

    fn changed(&self) -> Error {
        Error::data(&self.path, None, "changed while tabcard was reading it; run again on a file that stays put")
    }

    fn reader(&self) -> Result<ParquetRecordBatchReaderBuilder<std::fs::File>> {
        if identity_of(&self.file) != self.identity {
            return Err(self.changed());
        }
        let file = self.file.try_clone().map_err(|e| Error::io(&self.path, "open the data file", e))?;
        Ok(ParquetRecordBatchReaderBuilder::new_with_metadata(file, self.metadata.clone()))
    }

    /// The named columns (in file order) across every row group.
    pub fn read(&self, names: &[&str]) -> Result<Table> {
        let mut table = None;
        self.decode(names, usize::MAX, &mut |t| {
            table = Some(t);
            Ok(None)
        })?;
        let table = table.unwrap_or_default();
        self.check_rows(table.rows)?;
        Ok(table)
    }

    /// The named columns (in file order), [`CHUNK_ROWS`] rows at a time: `visit(first_row,
    /// chunk)`. Text codes mean the same level in every chunk (as in [`read_table`]).
    pub fn for_each_chunk(&self, names: &[&str], mut visit: impl FnMut(usize, &Table) -> Result<()>) -> Result<()> {
        let mut first = 0;
        self.decode(names, CHUNK_ROWS, &mut |t| {
            visit(first, &t)?;
            first += t.rows;
            Ok(Some(t))
        })?;
        self.check_rows(first)
    }

    fn check_rows(&self, got: usize) -> Result<()> {
        if got != self.rows {
            return Err(Error::data(
                &self.path,
                None,
                format!("corrupt Parquet file: the metadata declares {} rows but {got} were read", self.rows),
            ));
        }
        Ok(())
    }

    /// Decodes `names`, handing `sink` a table every `every` rows (and at the end); `sink` may hand
    /// the table back so its text levels carry on into the next chunk.
    fn decode(&self, names: &[&str], every: usize, sink: &mut dyn FnMut(Table) -> Result<Option<Table>>) -> Result<()> {
        let path = self.path.as_path();
        guarded(path, || {
            let builder = self.reader()?;
            let schema = builder.schema().clone();
            let mut wanted = Vec::with_capacity(names.len());
            for name in names {
                match self.index.get(*name) {
                    Some(&i) => wanted.push(i),
                    None => return Err(Error::data(path, Some(name), "is not in the file")),
                }
            }
            // In file order, each once.
            wanted.sort_unstable();
            wanted.dedup();
            let mut columns: Vec<Builder> = wanted.iter().map(|&i| Builder::new(schema.field(i))).collect();
            let mask = parquet::arrow::ProjectionMask::roots(builder.parquet_schema(), wanted.iter().copied());
            let reader = builder
                .with_projection(mask)
                .with_batch_size(CHUNK_ROWS)
                .build()
                .map_err(|e| Error::data(path, None, format!("not a readable Parquet file: {e}")))?;
            let mut rows = 0usize;
            let mut pending = 0usize;
            for batch in reader {
                let batch =
                    batch.map_err(|e| Error::data(path, None, format!("corrupt or truncated Parquet data after row {rows}: {e}")))?;
                for (builder, array) in columns.iter_mut().zip(batch.columns()) {
                    builder.append(array, path)?;
                }
                rows += batch.num_rows();
                pending += batch.num_rows();
                if pending >= every {
                    let chunk = Table { rows: std::mem::take(&mut pending), columns: columns.iter_mut().map(Builder::take).collect() };
                    if let Some(back) = sink(chunk)? {
                        for (builder, col) in columns.iter_mut().zip(back.columns) {
                            builder.restore(col);
                        }
                    }
                }
            }
            // The rows since the last chunk (all of them for a whole read); an empty file still
            // yields its (empty) columns.
            if pending > 0 || rows == 0 {
                sink(Table { rows: pending, columns: columns.into_iter().map(Builder::finish).collect() })?;
            }
            Ok(())
        })
    }
}

/// Opens a data file for reading, refusing anything but a regular file (a FIFO would block the
/// read forever, a folder or device is never a table). Symbolic links are followed.
pub fn open_regular(path: &Path) -> Result<std::fs::File> {
    let meta = std::fs::metadata(path).map_err(|e| Error::io(path, "open the data file", e))?;
    if !meta.is_file() {
        let kind = if meta.is_dir() { "a folder" } else { "not a regular file (a pipe, socket or device)" };
        return Err(Error::data(path, None, format!("is {kind}; tabcard reads Parquet tables from regular files only")));
    }
    std::fs::File::open(path).map_err(|e| Error::io(path, "open the data file", e))
}

thread_local! {
    /// Set while this thread runs a [`guarded`] read: its panics become errors, so the hook keeps
    /// them off the terminal. Any other panic, on any thread, is printed as usual.
    static IN_GUARDED_READ: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Installs (once) a panic hook that stays silent for panics inside a guarded read on the
/// panicking thread and hands every other panic to the hook that was there before.
fn quiet_guarded_panics() {
    static INSTALL: std::sync::Once = std::sync::Once::new();
    INSTALL.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            if !IN_GUARDED_READ.with(|flag| flag.get()) {
                previous(info);
            }
        }));
    });
}

/// Runs `f`, turning a panic inside the parquet crate on hostile input into a corrupt-file error:
/// never allowed to end the process, and never printed (the error says what failed).
fn guarded<T>(path: &Path, f: impl FnOnce() -> Result<T>) -> Result<T> {
    quiet_guarded_panics();
    let outer = IN_GUARDED_READ.with(|flag| flag.replace(true));
    let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(f));
    IN_GUARDED_READ.with(|flag| flag.set(outer));
    match result {
        Ok(result) => result,
        Err(panic) => {
            let detail =
                panic.downcast_ref::<String>().cloned().or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string())).unwrap_or_default();
            Err(Error::data(path, None, format!("corrupt Parquet file: the reader failed ({detail})")))
        }
    }
}
/// Checks every dictionary page's declared value count against its size before the Arrow reader
/// trusts it: the parquet crate allocates the declared count up front, so a hostile header could
/// otherwise ask for gigabytes. Data pages are skipped without decompressing them.
fn check_dictionary_pages<R: parquet::file::reader::ChunkReader + 'static>(file: R, path: &Path) -> Result<()> {
    use parquet::basic::Type as Physical;
    use parquet::column::page::Page;
    use parquet::file::reader::{FileReader, SerializedFileReader};
    let corrupt = |e: parquet::errors::ParquetError| Error::data(path, None, format!("corrupt Parquet page: {e}"));
    let reader = SerializedFileReader::new(file).map_err(corrupt)?;
    for g in 0..reader.num_row_groups() {
        let group = reader.get_row_group(g).map_err(corrupt)?;
        for c in 0..group.num_columns() {
            let meta = group.metadata().column(c);
            // Minimum encoded bits per value (PLAIN): a length prefix for byte arrays.
            let min_bits: u64 = match meta.column_type() {
                Physical::BOOLEAN => 1,
                Physical::INT32 | Physical::FLOAT => 32,
                Physical::INT64 | Physical::DOUBLE => 64,
                Physical::INT96 => 96,
                Physical::BYTE_ARRAY => 32,
                Physical::FIXED_LEN_BYTE_ARRAY => 8 * meta.column_descr().type_length().max(1) as u64,
            };
            // A dictionary page, when present, is a chunk's first page.
            let mut pages = group.get_column_page_reader(c).map_err(corrupt)?;
            if let Some(Page::DictionaryPage { buf, num_values, .. }) = pages.get_next_page().map_err(corrupt)? {
                if num_values as u64 * min_bits > 8 * buf.len() as u64 {
                    return Err(Error::data(
                        path,
                        Some(meta.column_path().string().as_str()),
                        format!("corrupt Parquet dictionary page in row group {g}: {num_values} values declared in {} bytes", buf.len()),
                    ));
                }
            }
        }
    }
    Ok(())
}

/// Reads a whole table; `open` gives a fresh reader over the same bytes each time it is called
/// (one pass checks the dictionary pages, one decodes).
fn read_from<R: parquet::file::reader::ChunkReader + 'static>(open: &dyn Fn() -> Result<R>, path: &Path) -> Result<Table> {
    guarded(path, || {
        let builder = checked_builder(open, path)?;
        let not_parquet = |e: parquet::errors::ParquetError| Error::data(path, None, format!("not a readable Parquet file: {e}"));
        let mut columns: Vec<Builder> = builder.schema().fields().iter().map(|f| Builder::new(f)).collect();
        let reader = builder.with_batch_size(CHUNK_ROWS).build().map_err(not_parquet)?;
        let mut rows = 0usize;
        for batch in reader {
            let batch = batch.map_err(|e| Error::data(path, None, format!("corrupt or truncated Parquet data after row {rows}: {e}")))?;
            for (builder, array) in columns.iter_mut().zip(batch.columns()) {
                builder.append(array, path)?;
            }
            rows += batch.num_rows();
        }
        Ok(Table { rows, columns: columns.into_iter().map(Builder::finish).collect() })
    })
}

/// Opens the reader and checks what the parquet crate would trust blindly or cannot use:
/// negative column offsets or sizes (it asserts on them), dictionary pages that declare more
/// values than they hold, column types tabcard cannot use, and repeated column names.
fn checked_builder<R: parquet::file::reader::ChunkReader + 'static>(
    open: &dyn Fn() -> Result<R>,
    path: &Path,
) -> Result<ParquetRecordBatchReaderBuilder<R>> {
    let not_parquet = |e: parquet::errors::ParquetError| Error::data(path, None, format!("not a readable Parquet file: {e}"));
    let builder = ParquetRecordBatchReaderBuilder::try_new(open()?).map_err(not_parquet)?;
    for (g, group) in builder.metadata().row_groups().iter().enumerate() {
        for column in group.columns() {
            let start = column.dictionary_page_offset().unwrap_or(column.data_page_offset());
            if start < 0 || column.compressed_size() < 0 {
                return Err(Error::data(
                    path,
                    Some(column.column_path().string().as_str()),
                    format!("corrupt Parquet metadata in row group {g}: negative column offset or size"),
                ));
            }
        }
    }
    check_dictionary_pages(open()?, path)?;
    let mut seen = std::collections::HashSet::new();
    for field in builder.schema().fields() {
        if !supported(field.data_type()) {
            return Err(Error::data(
                path,
                Some(field.name()),
                format!(
                    "has type {}, which tabcard cannot use; supported: floats, integers, booleans, strings, dictionary-encoded strings",
                    field.data_type()
                ),
            ));
        }
        if !seen.insert(field.name().clone()) {
            return Err(Error::data(path, Some(field.name()), "appears more than once in the schema"));
        }
    }
    Ok(builder)
}

/// How a Parquet file is written: compression and rows per row group.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct WriteOptions {
    pub snappy: bool,
    pub row_group_rows: usize,
}

impl Default for WriteOptions {
    fn default() -> Self {
        WriteOptions { snappy: true, row_group_rows: 1 << 20 }
    }
}

/// Encodes named Arrow arrays of equal length as a Parquet file in memory.
pub fn encode(columns: Vec<(String, ArrayRef)>, options: WriteOptions) -> Result<Vec<u8>> {
    use arrow::record_batch::RecordBatch;
    use parquet::arrow::ArrowWriter;
    use parquet::basic::Compression;
    use parquet::file::properties::WriterProperties;
    use std::sync::Arc;

    let engine = |e: String| Error::Encode(format!("Parquet: {e}"));
    let fields: Vec<Field> = columns.iter().map(|(name, a)| Field::new(name, a.data_type().clone(), a.null_count() > 0)).collect();
    let schema = Arc::new(Schema::new(fields));
    let batch = RecordBatch::try_new(schema.clone(), columns.into_iter().map(|(_, a)| a).collect()).map_err(|e| engine(e.to_string()))?;
    let props = WriterProperties::builder()
        .set_compression(if options.snappy { Compression::SNAPPY } else { Compression::UNCOMPRESSED })
        .set_max_row_group_row_count(Some(options.row_group_rows.max(1)))
        .build();
    let mut out = Vec::new();
    let mut writer = ArrowWriter::try_new(&mut out, schema, Some(props)).map_err(|e| engine(e.to_string()))?;
    writer.write(&batch).map_err(|e| engine(e.to_string()))?;
    writer.close().map_err(|e| engine(e.to_string()))?;
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    const CHILD: &str = "TABCARD_GUARDED_PANIC_CHILD";
    const NAME: &str = "data::parquet::tests::a_panic_inside_a_guarded_read_is_an_error_and_prints_nothing";

    #[test]
    fn a_panic_inside_a_guarded_read_is_an_error_and_prints_nothing() {
        if std::env::var_os(CHILD).is_some() {
            // In a child process, so its stderr can be read: a guarded panic becomes an error...
            let read: Result<()> = guarded(Path::new("x.parquet"), || panic!("boom inside the reader"));
            assert!(read.unwrap_err().to_string().contains("the reader failed (boom inside the reader)"));
            // ...while any other panic still reaches the previous hook.
            let _ = std::panic::catch_unwind(|| panic!("outside any guarded read"));
            return;
        }
        let exe = std::env::current_exe().unwrap();
        let out =
            std::process::Command::new(exe).args(["--exact", NAME, "--nocapture", "--test-threads=1"]).env(CHILD, "1").output().unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(out.status.success(), "{err}");
        assert!(!err.contains("boom inside the reader"), "a guarded panic was printed: {err}");
        assert!(err.contains("outside any guarded read"), "other panics still print: {err}");
    }
}
