//! The in-memory table tabcard works on: typed columns with optional nulls, and its logical content
//! hash, which depends on the schema and the values in row order but not on how the Parquet file
//! encoded them (compression, row groups, dictionary pages).

use sha2::{Digest, Sha256};

use crate::fingerprint::hex;

/// The values of one column. Null slots hold a fixed filler (0, false, `NULL_CODE`).
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnValues {
    Float(Vec<f64>),
    /// Float32 (and Float16) source columns, kept at their own width: a wide table of f32
    /// features then costs half the memory. Everywhere else they read as their exact f64 value.
    Float32(Vec<f32>),
    Int(Vec<i64>),
    Bool(Vec<bool>),
    /// Strings as codes into `levels`, levels numbered in order of first appearance.
    Text {
        codes: Vec<u32>,
        levels: Vec<String>,
    },
}

pub const NULL_CODE: u32 = u32::MAX;

#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    /// The Parquet/Arrow logical type as read, e.g. `Float32`, `Dictionary(Int32, Utf8)`.
    pub source_type: String,
    pub values: ColumnValues,
    /// `None` when the column has no nulls; otherwise `valid[row]`.
    pub valid: Option<Vec<bool>>,
}

impl Column {
    pub fn len(&self) -> usize {
        match &self.values {
            ColumnValues::Float(v) => v.len(),
            ColumnValues::Float32(v) => v.len(),
            ColumnValues::Int(v) => v.len(),
            ColumnValues::Bool(v) => v.len(),
            ColumnValues::Text { codes, .. } => codes.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    pub fn is_valid(&self, row: usize) -> bool {
        self.valid.as_ref().is_none_or(|v| v[row])
    }

    pub fn null_count(&self) -> usize {
        self.valid.as_ref().map_or(0, |v| v.iter().filter(|&&x| !x).count())
    }

    /// The value of a numeric (float, integer or boolean) column as f64, `None` if null or text.
    pub fn number(&self, row: usize) -> Option<f64> {
        if !self.is_valid(row) {
            return None;
        }
        match &self.values {
            ColumnValues::Float(v) => Some(v[row]),
            ColumnValues::Float32(v) => Some(f64::from(v[row])),
            ColumnValues::Int(v) => Some(v[row] as f64),
            ColumnValues::Bool(v) => Some(v[row] as u8 as f64),
            ColumnValues::Text { .. } => None,
        }
    }

    /// The value rendered as a category label (used for text, and for numbers declared categorical).
    pub fn label(&self, row: usize) -> Option<String> {
        if !self.is_valid(row) {
            return None;
        }
        Some(match &self.values {
            ColumnValues::Float(v) => format!("{}", v[row]),
            ColumnValues::Float32(v) => format!("{}", f64::from(v[row])),
            ColumnValues::Int(v) => v[row].to_string(),
            ColumnValues::Bool(v) => v[row].to_string(),
            ColumnValues::Text { codes, levels } => levels[codes[row] as usize].clone(),
        })
    }

    pub fn kind_name(&self) -> &'static str {
        match &self.values {
            ColumnValues::Float(_) | ColumnValues::Float32(_) => "float",
            ColumnValues::Int(_) => "integer",
            ColumnValues::Bool(_) => "boolean",
            ColumnValues::Text { .. } => "string",
        }
    }

    pub fn is_text(&self) -> bool {
        matches!(self.values, ColumnValues::Text { .. })
    }
}

#[derive(Debug, Clone, PartialEq, Default)]
pub struct Table {
    pub rows: usize,
    pub columns: Vec<Column>,
}

impl Table {
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }

    /// SHA-256 over the schema (names, kinds, source types) and every value in row order.
    pub fn content_hash(&self) -> String {
        let mut hasher = ContentHasher::new(self.rows, self.columns.len());
        for col in &self.columns {
            hasher.add(col);
        }
        hasher.finish()
    }
}

/// The content hash computed one column at a time, in table order: the same digest as
/// [`Table::content_hash`], for a reader that never holds every column at once.
pub struct ContentHasher {
    h: Sha256,
    buf: Vec<u8>,
}

impl ContentHasher {
    pub fn new(rows: usize, columns: usize) -> Self {
        let mut h = Sha256::new();
        h.update(b"tabcard-table-v1");
        h.update((rows as u64).to_le_bytes());
        h.update((columns as u64).to_le_bytes());
        ContentHasher { h, buf: Vec::with_capacity(1 << 16) }
    }

    /// Adds the next column (columns must come in table order).
    pub fn add(&mut self, col: &Column) {
        let (h, buf) = (&mut self.h, &mut self.buf);
        let flush = |h: &mut Sha256, buf: &mut Vec<u8>, force: bool| {
            if force || buf.len() >= (1 << 16) - 16 {
                h.update(&buf[..]);
                buf.clear();
            }
        };
        for part in [col.name.as_str(), col.kind_name(), col.source_type.as_str()] {
            h.update((part.len() as u64).to_le_bytes());
            h.update(part.as_bytes());
        }
        match &col.valid {
            None => h.update([0u8]),
            Some(valid) => {
                h.update([1u8]);
                for chunk in valid.chunks(8) {
                    let byte = chunk.iter().enumerate().fold(0u8, |b, (i, &v)| b | ((v as u8) << i));
                    buf.push(byte);
                    flush(h, buf, false);
                }
                flush(h, buf, true);
            }
        }
        match &col.values {
            ColumnValues::Float(v) => {
                for chunk in v.chunks(4096) {
                    for x in chunk {
                        buf.extend_from_slice(&x.to_le_bytes());
                    }
                    flush(h, buf, true);
                }
            }
            // Hashed as the f64 values they read as: the hash does not depend on storage.
            ColumnValues::Float32(v) => {
                for chunk in v.chunks(4096) {
                    for x in chunk {
                        buf.extend_from_slice(&f64::from(*x).to_le_bytes());
                    }
                    flush(h, buf, true);
                }
            }
            ColumnValues::Int(v) => {
                for chunk in v.chunks(4096) {
                    for x in chunk {
                        buf.extend_from_slice(&x.to_le_bytes());
                    }
                    flush(h, buf, true);
                }
            }
            ColumnValues::Bool(v) => {
                for chunk in v.chunks(1 << 15) {
                    buf.extend(chunk.iter().map(|&b| b as u8));
                    flush(h, buf, true);
                }
            }
            ColumnValues::Text { codes, levels } => {
                h.update((levels.len() as u64).to_le_bytes());
                for level in levels {
                    h.update((level.len() as u64).to_le_bytes());
                    h.update(level.as_bytes());
                }
                for chunk in codes.chunks(8192) {
                    for x in chunk {
                        buf.extend_from_slice(&x.to_le_bytes());
                    }
                    flush(h, buf, true);
                }
            }
        }
    }

    pub fn finish(self) -> String {
        hex(&self.h.finalize())
    }
}
