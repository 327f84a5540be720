//! Whole-table and by-name reads of a Parquet file (for `predict`, `scaffold` and tests; the
//! experiment streams through [`super::file::ParquetSource`]).

use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::path::Path;

use super::checks::read_from;
use super::file::ParquetSource;
use super::guard::open_regular;
use crate::data::table::Table;
use crate::error::{Error, Result};

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
