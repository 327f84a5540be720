//! The guard every command applies to a file a user names for it to write: never an input,
//! never a path inside a results store, never a folder, an existing file only with `--force`.

use std::path::{Path, PathBuf};

use super::ledger;
use crate::error::{Error, Result};

/// `path` made absolute with its folder resolved (the file itself need not exist yet).
fn resolved(path: &Path) -> Result<PathBuf> {
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let folder = folder.canonicalize().map_err(|e| Error::io(folder, "find the output's folder", e))?;
    Ok(match path.file_name() {
        Some(name) => folder.join(name),
        None => folder,
    })
}

/// The results store `path` would be written into, if any: an experiment's results folder (it
/// holds `format.json`) or a results root (it holds the ledger).
fn enclosing_store(path: &Path) -> Option<PathBuf> {
    path.ancestors().skip(1).find(|dir| dir.join("format.json").is_file() || dir.join(ledger::FILE).is_file()).map(Path::to_path_buf)
}

/// The guard every command applies to a file a user names for it to write (`--out` of `predict`
/// and `scaffold`, the tables of `demo-data`): never one of its `inputs`, never a path inside a
/// results store (its files are the audit trail), never a folder, and an existing file only with
/// `force`. `option` names the argument and `what` the output in the error.
pub fn check_output_path(option: &str, what: &str, output: &Path, inputs: &[&Path], force: bool) -> Result<()> {
    let out = resolved(output)?;
    for input in inputs {
        if let Ok(input) = input.canonicalize() {
            if out == input || out.canonicalize().is_ok_and(|o| o == input) {
                return Err(Error::Usage(format!("{option} {} is the input table; write {what} to another file", output.display())));
            }
        }
    }
    if let Some(store) = enclosing_store(&out) {
        return Err(Error::Usage(format!(
            "{option} {} is inside the results store {}, whose files are the audit trail; write {what} elsewhere",
            output.display(),
            store.display()
        )));
    }
    if out.is_dir() {
        return Err(Error::Usage(format!("{option} {} is a folder; name a file", output.display())));
    }
    if out.exists() && !force {
        return Err(Error::Usage(format!("{option} {} exists; pass --force to replace it", output.display())));
    }
    Ok(())
}
