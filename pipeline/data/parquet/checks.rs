//! What the parquet crate would trust blindly or cannot use, checked before any value is read:
//! negative offsets, dictionary pages that declare more values than they hold, unsupported column
//! types, repeated names; and the whole-table read built on those checks.

use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::path::Path;

use super::columns::{supported, Builder, CHUNK_ROWS};
use super::guard::guarded;
use crate::data::table::Table;
use crate::error::{Error, Result};

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
pub(super) fn read_from<R: parquet::file::reader::ChunkReader + 'static>(open: &dyn Fn() -> Result<R>, path: &Path) -> Result<Table> {
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
pub(super) fn checked_builder<R: parquet::file::reader::ChunkReader + 'static>(
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
