//! The append-only ledger at the results root: one JSON line per completed selection (a `train`
//! that trained nothing adds none).

use serde::{Deserialize, Serialize};
use std::io::Write;
use std::path::Path;

use crate::error::{Error, Result};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct LedgerEntry {
    pub time: String,
    pub experiment: String,
    pub fingerprint: String,
    /// The results folder's name, beside the ledger (never an absolute path: the ledger is
    /// committed and must read the same in every checkout).
    pub results: String,
    pub git_commit: Option<String>,
    pub git_dirty: Option<bool>,
    pub runs_planned: usize,
    pub runs_trained: usize,
    pub runs_reused: usize,
    pub runs_failed: usize,
    pub selected_run: Option<String>,
    pub selection_metric: String,
    pub selected_value: Option<f64>,
    pub tool_version: String,
    /// The results digest of the folder as this invocation left it (`store::integrity`); absent
    /// in lines written before tabcard recorded it.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub results_digest: Option<String>,
}

pub(crate) const FILE: &str = "ledger.jsonl";

/// Appends one line with a single write on a file opened for appending.
pub(crate) fn append(results_root: &Path, entry: &LedgerEntry) -> Result<()> {
    let line = serde_json::to_string(entry).map_err(|e| Error::Internal(format!("ledger line: {e}")))? + "\n";
    append_line(&results_root.join(FILE), line)
}

pub(crate) fn read(results_root: &Path) -> Result<Vec<LedgerEntry>> {
    read_lines(&results_root.join(FILE))
}

/// One `verify` invocation, appended to `verifications.jsonl` beside the ledger.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct VerificationEntry {
    pub time: String,
    pub fingerprint: String,
    pub results: String,
    pub runs_checked: usize,
    pub identical: bool,
    /// The runs of the experiment's plan (absent in lines written before tabcard 0.9).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub runs_planned: Option<usize>,
    /// Every run retrained (`--all`), or the selected configuration's only.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub all: Option<bool>,
    /// The verifying tabcard and the machine it ran on (architecture, OS, dispatch level).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub tool_version: Option<String>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub machine: Option<String>,
}

impl VerificationEntry {
    /// What was verified, in words: `3 of 15 runs on 2026-12-03` (`3 runs on ...` for old lines).
    pub(crate) fn describe(&self) -> String {
        let runs = match self.runs_planned {
            Some(planned) => format!("{} of {planned} runs", self.runs_checked),
            None => format!("{} runs", self.runs_checked),
        };
        format!("{runs} on {}", self.time.get(..10).unwrap_or(&self.time))
    }
}

pub(crate) const VERIFICATIONS: &str = "verifications.jsonl";

fn append_line(path: &Path, line: String) -> Result<()> {
    let mut f = std::fs::OpenOptions::new().create(true).append(true).open(path).map_err(|e| Error::io(path, "open for appending", e))?;
    f.write_all(line.as_bytes()).map_err(|e| Error::io(path, "append to", e))?;
    f.sync_all().map_err(|e| Error::io(path, "sync", e))
}

pub(crate) fn append_verification(results_root: &Path, entry: &VerificationEntry) -> Result<()> {
    let line = serde_json::to_string(entry).map_err(|e| Error::Internal(format!("ledger line: {e}")))? + "\n";
    append_line(&results_root.join(VERIFICATIONS), line)
}

pub(crate) fn read_verifications(results_root: &Path) -> Result<Vec<VerificationEntry>> {
    read_lines(&results_root.join(VERIFICATIONS))
}

/// One monitoring record, appended to `monitoring.jsonl` beside the ledger when `monitor` writes it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct MonitoringEntry {
    pub time: String,
    pub fingerprint: String,
    pub results: String,
    /// The record's folder name under `monitoring/`.
    pub record: String,
    pub batch_sha256: String,
    pub rows: usize,
    /// `stable`, `watch` or `act`.
    pub status: String,
    /// The largest feature stability index and its column.
    pub worst_feature: Option<String>,
    pub worst_psi: Option<f64>,
    /// The score's stability index.
    pub score_psi: f64,
    /// SHA-256 of the record's `contents.sha256`.
    pub record_digest: String,
}

pub(crate) const MONITORING: &str = "monitoring.jsonl";

pub(crate) fn append_monitoring(results_root: &Path, entry: &MonitoringEntry) -> Result<()> {
    let line = serde_json::to_string(entry).map_err(|e| Error::Internal(format!("monitoring line: {e}")))? + "\n";
    append_line(&results_root.join(MONITORING), line)
}

pub(crate) fn read_monitoring(results_root: &Path) -> Result<Vec<MonitoringEntry>> {
    read_lines(&results_root.join(MONITORING))
}

fn read_lines<T: serde::de::DeserializeOwned>(path: &Path) -> Result<Vec<T>> {
    let text = match std::fs::read_to_string(path) {
        Ok(t) => t,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(Vec::new()),
        Err(e) => return Err(Error::io(path, "read", e)),
    };
    text.lines()
        .enumerate()
        .filter(|(_, l)| !l.trim().is_empty())
        .map(|(i, l)| serde_json::from_str(l).map_err(|e| Error::store(path, format!("line {}: {e}", i + 1))))
        .collect()
}
