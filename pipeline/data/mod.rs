//! Tabular data: reading Parquet, typed columns and their content hash, column roles and the
//! target, the data summary, the split and what it lets through, and preprocessing.

pub mod csv;
pub mod leakage;
pub mod parquet;
pub mod prep;
pub mod roles;
pub mod split;
pub mod summary;
pub mod table;
