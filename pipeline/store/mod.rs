//! The only writer: atomic file writes (temp file in the same folder, fsync, rename), the results
//! layout, and the ledger. Nothing half-written is ever visible under a final name.
//!
//! `files` holds the primitives (atomic writes, JSON, folders) every other part uses; `layout`
//! the folder's files and its sealed check; `output` the guard for files users name.

pub mod attached;
pub mod decision_log;
pub(crate) mod files;
mod hash_list;
pub mod integrity;
pub(crate) mod layout;
pub(crate) mod ledger;
pub(crate) mod lock;
pub(crate) mod output;
pub mod run;
pub(crate) mod timing;
pub(crate) mod weights;

pub use files::{create_dir, folder_name, read_json, to_json, write_atomic, write_json};
pub use integrity::remove_temporaries;
pub use layout::{FormatRecord, Layout, FORMAT_VERSION, READABLE_VERSIONS};
pub use output::check_output_path;
