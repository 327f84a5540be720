//! Tabular data: reading Parquet, typed columns and their content hash, column roles and the
//! target, the data summary, the split and what it lets through, and preprocessing; `scan` is the
//! first pass over a file, one column (or one chunk of rows) at a time.

pub(crate) mod bins;
pub(crate) mod csv;
pub mod leakage;
pub(crate) mod order;
pub mod parquet;
pub mod prep;
pub mod roles;
pub(crate) mod scan;
pub(crate) mod source;
pub mod split;
pub mod summary;
pub mod table;
