//! Reading a Parquet file into a [`Table`] with the `parquet` crate's Arrow reader. Supported column
//! types: floats, integers, booleans, strings and dictionary-encoded strings, all with nulls; any
//! other type is an error naming the column and its type. Data files are read here only.

pub(crate) mod checks;
pub(crate) mod columns;
pub(crate) mod file;
pub(crate) mod guard;
pub(crate) mod read;
pub(crate) mod write;

pub use columns::CHUNK_ROWS;
pub use file::ParquetSource;
pub use guard::{not_a_table_file, open_regular};
pub use read::{column_names, read_columns, read_table, read_table_from_bytes};
pub use write::{encode, encode_with_metadata, WriteOptions};
