//! `tabcard demo-data <folder>`: writes the invented demo tables (see `demo.rs`) as Parquet.

use std::path::Path;

use crate::data::parquet::{encode, WriteOptions};
use crate::demo::{greenhouse_yield, lease_defaults};
use crate::error::Result;
use crate::store::write_atomic;

pub const LEASE_ROWS: usize = 24_000;
pub const GREENHOUSE_ROWS: usize = 6_000;

/// Writes both tables into `folder`. A table already there with the same bytes is left as it is;
/// one with other bytes (another seed, or a file of the user's) is replaced only with `force`,
/// like every other file a command writes.
pub fn run(folder: &Path, seed: u64, force: bool) -> Result<String> {
    std::fs::create_dir_all(folder).map_err(|e| crate::error::Error::io(folder, "create the folder", e))?;
    let mut out = String::new();
    for (file, columns) in [
        ("lease-applications.parquet", lease_defaults(LEASE_ROWS, seed)),
        ("greenhouse-yield.parquet", greenhouse_yield(GREENHOUSE_ROWS, seed)),
    ] {
        let bytes = encode(columns, WriteOptions::default())?;
        let path = folder.join(file);
        if std::fs::read(&path).is_ok_and(|existing| existing == bytes) {
            out.push_str(&format!("unchanged {} (the same table is already there)\n", path.display()));
            continue;
        }
        crate::store::check_output_path("demo-data", "the demo tables", &path, &[], force)?;
        write_atomic(&path, &bytes)?;
        out.push_str(&format!("wrote {} ({} bytes)\n", path.display(), bytes.len()));
    }
    Ok(out)
}
