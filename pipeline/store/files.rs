//! Files as the store writes and reads them: atomic writes (temp file in the same folder, fsync,
//! rename), JSON with stable key order, folders. Nothing half-written is ever visible under a
//! final name.

use std::io::Write;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};

fn temp_name(path: &Path) -> PathBuf {
    let name = path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    static COUNTER: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let n = COUNTER.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
    path.with_file_name(format!(".{name}.tmp-{}-{n}", std::process::id()))
}

/// The last component of a results folder's path, as the ledger records it.
pub fn folder_name(path: &Path) -> String {
    path.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default()
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

/// Pretty JSON with stable key order (struct order, sorted maps), newline-terminated.
pub fn to_json<T: serde::Serialize>(value: &T) -> Result<Vec<u8>> {
    let mut bytes = serde_json::to_vec_pretty(value).map_err(|e| Error::Internal(format!("serialising JSON: {e}")))?;
    bytes.push(b'\n');
    Ok(bytes)
}

pub fn write_json<T: serde::Serialize>(path: &Path, value: &T) -> Result<()> {
    write_atomic(path, &to_json(value)?)
}

pub fn read_json<T: serde::de::DeserializeOwned>(path: &Path) -> Result<T> {
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, "read", e))?;
    serde_json::from_slice(&bytes).map_err(|e| Error::store(path, format!("unreadable or tampered JSON: {e}")))
}

pub fn create_dir(path: &Path) -> Result<()> {
    std::fs::create_dir_all(path).map_err(|e| Error::io(path, "create the folder", e))
}
