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

pub mod integrity;
pub mod ledger;
pub mod lock;
pub mod run;
pub mod timing;
pub mod weights;

/// The version of the results layout this tool writes. Version 2 added `integrity.sha256` and
/// the results digest; version 3 renamed a run's `metrics.json`, `config.json` and `run.json` to
/// `result.json`, `settings.json` and `checksums.json`.
pub const FORMAT_VERSION: u32 = 3;

/// The layout versions this tool reads (a version-2 folder under its own file names).
pub const READABLE_VERSIONS: &[u32] = &[2, 3];

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

/// Identifies a results folder and the tool that wrote it.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct FormatRecord {
    pub format: String,
    pub version: u32,
    pub tool_version: String,
}

impl FormatRecord {
    pub fn current() -> Self {
        FormatRecord { format: "tabcard-results".into(), version: FORMAT_VERSION, tool_version: env!("CARGO_PKG_VERSION").into() }
    }
}

/// The files of one experiment's results folder.
#[derive(Debug, Clone)]
pub struct Layout {
    pub root: PathBuf,
}

impl Layout {
    pub fn new(root: impl Into<PathBuf>) -> Self {
        Layout { root: root.into() }
    }
    pub fn format(&self) -> PathBuf {
        self.root.join("format.json")
    }
    pub fn manifest(&self) -> PathBuf {
        self.root.join("manifest.json")
    }
    pub fn manifest_source(&self) -> PathBuf {
        self.root.join("manifest.source.toml")
    }
    pub fn experiment(&self) -> PathBuf {
        self.root.join("experiment.json")
    }
    pub fn data_summary(&self) -> PathBuf {
        self.root.join("data-summary.json")
    }
    pub fn plan(&self) -> PathBuf {
        self.root.join("plan.json")
    }
    pub fn preprocessor(&self) -> PathBuf {
        self.root.join("preprocessor.json")
    }
    pub fn selection(&self) -> PathBuf {
        self.root.join("selection.json")
    }
    pub fn timing(&self) -> PathBuf {
        self.root.join("timing.json")
    }
    pub fn card(&self) -> PathBuf {
        self.root.join("card.md")
    }
    pub fn figures(&self) -> PathBuf {
        self.root.join("figures")
    }
    pub fn runs(&self) -> PathBuf {
        self.root.join("runs")
    }
    pub fn run(&self, id: &str) -> PathBuf {
        self.runs().join(id)
    }

    /// Checks that the folder is a finished results folder whose every file matches its integrity
    /// list, then its format; returns the results digest. What `card`, `compare`, `predict` and
    /// `verify` call before trusting anything in it.
    pub fn check_sealed(&self) -> Result<String> {
        self.check_sealed_parts(false)
    }

    /// [`Layout::check_sealed`] where only the evidence must match (rendered files may differ):
    /// what `card` checks before it renders them anew.
    pub fn check_sealed_evidence(&self) -> Result<String> {
        self.check_sealed_parts(true)
    }

    fn check_sealed_parts(&self, rendered_may_differ: bool) -> Result<String> {
        if !self.format().exists() {
            return Err(Error::store(&self.root, "is not a tabcard results folder (no format.json)"));
        }
        if let Ok(FormatRecord { version: 1, tool_version, .. }) = read_json::<FormatRecord>(&self.format()) {
            return Err(Error::store(
                self.format(),
                format!(
                "results layout version 1, written by tabcard {tool_version} before results folders carried integrity.sha256; \
                 check it with the tabcard that wrote it (its run indexes still hold every run file's SHA-256), or retrain it with this one"
            ),
            ));
        }
        let digest = if rendered_may_differ { integrity::check_evidence(&self.root)? } else { integrity::check(&self.root)? };
        self.check_format()?;
        Ok(digest)
    }

    /// Checks that the folder was written by a tool that uses this layout.
    pub fn check_format(&self) -> Result<FormatRecord> {
        let path = self.format();
        if !path.exists() {
            return Err(Error::store(&self.root, "is not a tabcard results folder (no format.json)"));
        }
        let record: FormatRecord = read_json(&path)?;
        if record.format != "tabcard-results" {
            return Err(Error::store(&path, format!("unknown format `{}`", record.format)));
        }
        if !READABLE_VERSIONS.contains(&record.version) {
            return Err(Error::store(
                &path,
                format!(
                    "results layout version {} written by tabcard {}; this tabcard {} reads versions {READABLE_VERSIONS:?}",
                    record.version,
                    record.tool_version,
                    env!("CARGO_PKG_VERSION")
                ),
            ));
        }
        Ok(record)
    }
}
