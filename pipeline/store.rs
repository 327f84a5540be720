//! The only writer: atomic file writes (temp file in the same folder, fsync, rename), the results
//! layout, and the ledger. Nothing half-written is ever visible under a final name.

use std::io::Write;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

fn temp_name(path: &Path) -> PathBuf {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    static COUNTER: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    path.with_file_name(format!(".{name}.tmp-{}-{n}", std::process::id()))
}

/// Writes `bytes` to `path` atomically: a reader sees the old file, or the whole new one.
pub fn write_atomic(path: &Path, bytes: &[u8]) -> Result<()> {
    let tmp = temp_name(path);
    let result = (|| {
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(Error::io(path, "write", e));
    }
    Ok(())
}
