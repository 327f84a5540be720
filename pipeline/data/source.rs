//! Where an experiment's columns come from: a Parquet file read one column (or one chunk of rows)
//! at a time, or a table already in memory. Everything after reading works through this trait, so
//! the streamed path and the in-memory path run the same code.

use std::borrow::Cow;
use std::path::Path;

use super::parquet::ParquetSource;
use super::table::{Column, Table};
use crate::error::{Error, Result};

pub trait ColumnSource {
    /// The file, for error messages.
    fn path(&self) -> &Path;
    fn rows(&self) -> usize;
    /// Column names in table order.
    fn names(&self) -> Vec<String>;
    /// Whether the column holds strings.
    fn is_text(&self, name: &str) -> bool;
    /// One whole column (every row), checked to hold exactly [`ColumnSource::rows`] values.
    fn column(&self, name: &str) -> Result<Cow<'_, Column>>;
    /// Several whole columns, in the order named (each name once): one read for all of them, so
    /// that a wide table costs one pass over its metadata per window, not per column.
    fn columns(&self, names: &[&str]) -> Result<Vec<Cow<'_, Column>>> {
        names.iter().map(|n| self.column(n)).collect()
    }
    /// The named columns (in table order) over consecutive chunks of rows: `visit(first_row, chunk)`.
    /// A text column's codes mean the same level in every chunk.
    fn for_each_chunk(&self, names: &[&str], visit: &mut dyn FnMut(usize, &Table) -> Result<()>) -> Result<()>;
}

/// Values (rows x columns) one read of whole columns may decode at once: about 16 MB of f64.
const VALUES_PER_READ: usize = 2 << 20;

/// How many whole columns one read takes for a table of `rows` rows: as many as fit in
/// [`VALUES_PER_READ`], at least `at_least` (the threads that share them), at most 256.
pub(crate) fn columns_per_read(rows: usize, at_least: usize) -> usize {
    (VALUES_PER_READ / rows.max(1)).clamp(at_least.max(1), 256.max(at_least))
}

impl ColumnSource for ParquetSource {
    fn path(&self) -> &Path {
        ParquetSource::path(self)
    }

    fn rows(&self) -> usize {
        ParquetSource::rows(self)
    }

    fn names(&self) -> Vec<String> {
        ParquetSource::names(self)
    }

    fn is_text(&self, name: &str) -> bool {
        ParquetSource::is_text(self, name)
    }

    fn column(&self, name: &str) -> Result<Cow<'_, Column>> {
        let mut table = self.read(&[name])?;
        table.columns.pop().map(Cow::Owned).ok_or_else(|| Error::data(self.path(), Some(name), "is not in the file"))
    }

    fn columns(&self, names: &[&str]) -> Result<Vec<Cow<'_, Column>>> {
        // The read returns file order; hand them back in the order asked.
        let mut read: Vec<Option<Column>> = self.read(names)?.columns.into_iter().map(Some).collect();
        let position: std::collections::HashMap<String, usize> =
            read.iter().enumerate().filter_map(|(i, c)| c.as_ref().map(|c| (c.name.clone(), i))).collect();
        names
            .iter()
            .map(|name| {
                position
                    .get(*name)
                    .and_then(|&i| read[i].take())
                    .map(Cow::Owned)
                    .ok_or_else(|| Error::data(self.path(), Some(name), "is not in the file"))
            })
            .collect()
    }

    fn for_each_chunk(&self, names: &[&str], visit: &mut dyn FnMut(usize, &Table) -> Result<()>) -> Result<()> {
        ParquetSource::for_each_chunk(self, names, visit)
    }
}
