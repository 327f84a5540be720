//! `tabcard demo-data <folder>`: writes the invented demo tables (see `demo.rs`) as Parquet.

use std::path::Path;

use crate::data::parquet::{encode, WriteOptions};
use crate::demo::{greenhouse_yield, lease_defaults};
use crate::error::Result;
use crate::store::write_atomic;

pub const LEASE_ROWS: usize = 24_000;
pub const GREENHOUSE_ROWS: usize = 6_000;

pub fn run(folder: &Path, seed: u64) -> Result<String> {
    std::fs::create_dir_all(folder).map_err(|e| crate::error::Error::io(folder, "create the folder", e))?;
    let mut out = String::new();
    for (file, columns) in [
        ("lease-applications.parquet", lease_defaults(LEASE_ROWS, seed)),
        ("greenhouse-yield.parquet", greenhouse_yield(GREENHOUSE_ROWS, seed)),
    ] {
        let bytes = encode(columns, WriteOptions::default())?;
        let path = folder.join(file);
        // The demo tables are regenerated in place (they are invented and seeded), but never
        // inside a results store.
        crate::store::check_output_path("demo-data", "the demo tables", &path, &[], true)?;
        write_atomic(&path, &bytes)?;
        out.push_str(&format!("wrote {} ({} bytes)\n", path.display(), bytes.len()));
    }
    Ok(out)
}
