//! [`ParquetSource`]: a Parquet file opened once, its footer parsed and checked once, then read
//! a window of columns or a chunk of rows at a time.

use arrow::datatypes::*;
use parquet::arrow::arrow_reader::{ArrowReaderMetadata, ParquetRecordBatchReaderBuilder};
use std::collections::HashMap;
use std::path::Path;

use super::checks::checked_builder;
use super::columns::{empty_values, Builder, CHUNK_ROWS};
use super::guard::{guarded, open_regular};
use crate::data::table::{ColumnValues, Table};
use crate::error::{Error, Result};

/// A Parquet file opened once and checked once (metadata offsets, dictionary page sizes, column
/// types, unique names), then read a few columns at a time, or a few rows at a time, without ever
/// holding the whole decoded table. The file stays open, so a file replaced by rename between two
/// reads is still read as it was; a file changed in place (length or modification time) is an
/// error, never silently mixed.
/// A reader of the open file from a position of its own: positioned reads leave the file's shared
/// offset alone, so the whole-file hash can run beside the column reads of the first pass.
struct Positioned<'a> {
    file: &'a std::fs::File,
    at: u64,
}

impl std::io::Read for Positioned<'_> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = std::os::unix::fs::FileExt::read_at(self.file, buf, self.at)?;
        self.at += n as u64;
        Ok(n)
    }
}

/// The open file as the Parquet reader's source, read only by positioned reads: the reader
/// parquet implements for `File` seeks the offset every clone of the handle shares, so two
/// decodes at once would read each other's places. With this one, any number of threads decode
/// columns of the same file at once.
struct PositionedSource(std::sync::Arc<std::fs::File>);

/// A [`PositionedSource`] reader from one position.
struct OwnedPositioned {
    file: std::sync::Arc<std::fs::File>,
    at: u64,
}

impl std::io::Read for OwnedPositioned {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        Positioned { file: &self.file, at: self.at }.read(buf).inspect(|&n| self.at += n as u64)
    }
}

impl parquet::file::reader::Length for PositionedSource {
    fn len(&self) -> u64 {
        self.0.metadata().map_or(0, |m| m.len())
    }
}

impl parquet::file::reader::ChunkReader for PositionedSource {
    type T = std::io::BufReader<OwnedPositioned>;

    fn get_read(&self, start: u64) -> parquet::errors::Result<Self::T> {
        Ok(std::io::BufReader::new(OwnedPositioned { file: self.0.clone(), at: start }))
    }

    fn get_bytes(&self, start: u64, length: usize) -> parquet::errors::Result<bytes::Bytes> {
        let mut buffer = vec![0u8; length];
        std::os::unix::fs::FileExt::read_exact_at(self.0.as_ref(), &mut buffer, start)
            .map_err(|e| parquet::errors::ParquetError::External(Box::new(e)))?;
        Ok(buffer.into())
    }
}

pub struct ParquetSource {
    path: std::path::PathBuf,
    file: std::sync::Arc<std::fs::File>,
    /// The footer, parsed once: every later read reuses it, so a read of a few columns costs the
    /// same on a 10,000-column file as on a 10-column one.
    metadata: ArrowReaderMetadata,
    fields: Vec<Field>,
    /// Column name -> position in the file, so that looking a column up costs the same at any width.
    index: HashMap<String, usize>,
    rows: usize,
    identity: (u64, Option<std::time::SystemTime>),
}

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
        Ok(ParquetSource { path: path.to_path_buf(), file: std::sync::Arc::new(file), metadata, fields, index, rows, identity })
    }

    pub fn path(&self) -> &Path {
        &self.path
    }

    /// SHA-256 of the file's bytes, read through the handle every later read uses, and its length.
    pub fn file_sha256(&self) -> Result<(String, u64)> {
        let (digest, bytes) = crate::fingerprint::reader_sha256(Positioned { file: &self.file, at: 0 }, &self.path)?;
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

    fn reader(&self) -> Result<ParquetRecordBatchReaderBuilder<PositionedSource>> {
        if identity_of(&self.file) != self.identity {
            return Err(self.changed());
        }
        Ok(ParquetRecordBatchReaderBuilder::new_with_metadata(PositionedSource(self.file.clone()), self.metadata.clone()))
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
