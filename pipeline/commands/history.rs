//! `tabcard history [--results DIR]`: the ledger: every completed selection with its time,
//! experiment, fingerprint, git commit, selected metric, what its latest verification checked
//! (runs of runs planned, when) and its latest monitoring status.

use std::fmt::Write;
use std::path::Path;

use crate::error::Result;
use crate::format::fixed;
use crate::store::ledger::{read, read_monitoring, read_verifications};
use crate::text::terminal_cell;

pub fn run(results_root: &Path) -> Result<super::Report> {
    let entries = read(results_root)?;
    let verifications = read_verifications(results_root)?;
    let monitoring = read_monitoring(results_root)?;
    let json = serde_json::json!({ "selections": entries, "verifications": verifications, "monitoring": monitoring });
    let mut out = String::new();
    if entries.is_empty() {
        let _ = writeln!(out, "no experiments recorded in {}", results_root.display());
        return Ok(super::Report { text: out, json });
    }
    let _ = writeln!(
        out,
        "{:<20}  {:<28} {:<16} {:<10} {:>6} {:>6}  {:<22} {:<28} monitored",
        "time", "experiment", "fingerprint", "commit", "new", "reused", "selected metric", "verified"
    );
    let latest_monitoring = |fingerprint: &str| match monitoring.iter().rev().find(|m| m.fingerprint == fingerprint) {
        Some(m) => format!("{} ({})", m.status, m.time),
        None => "-".into(),
    };
    for e in &entries {
        let commit = match (&e.git_commit, e.git_dirty) {
            (Some(c), Some(true)) => format!("{}+", &c[..8.min(c.len())]),
            (Some(c), _) => c[..8.min(c.len())].to_string(),
            _ => "-".into(),
        };
        let metric = e.selected_value.map(|v| format!("{} {}", e.selection_metric, fixed(v, 4))).unwrap_or_else(|| "-".into());
        let verified = match verifications.iter().rev().find(|v| v.fingerprint == e.fingerprint) {
            Some(v) if v.identical => format!("yes: {}", v.describe()),
            Some(v) => format!("FAILED: {}", v.describe()),
            None => "no".into(),
        };
        let _ = writeln!(
            out,
            "{:<20}  {:<28} {:<16} {:<10} {:>6} {:>6}  {:<22} {:<28} {}",
            e.time,
            terminal_cell(&e.experiment, 28),
            &e.fingerprint[..16],
            commit,
            e.runs_trained,
            e.runs_reused,
            metric,
            verified,
            latest_monitoring(&e.fingerprint)
        );
    }
    Ok(super::Report { text: out, json })
}
