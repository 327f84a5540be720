//! `tabcard list [--results DIR]`: every experiment folder in a results root, with its
//! fingerprint, name, training date, selected configuration, headline test figure and whether its
//! latest verification reproduced it.

use std::fmt::Write;
use std::path::Path;

use crate::error::{Error, Result};
use crate::experiment::plan::config_label;
use crate::format::fixed;
use crate::results::Listing;
use crate::store::ledger::{read_monitoring, read_verifications, MonitoringEntry, VerificationEntry};
use crate::text::terminal_cell;

/// One listed experiment.
#[derive(serde::Serialize)]
struct Listed {
    folder: String,
    fingerprint: String,
    name: String,
    trained_at: Option<String>,
    selected: String,
    metric: String,
    test_value: Option<f64>,
    /// `yes`, `FAILED` or `no`, from the latest verification of this fingerprint; `TAMPERED` when
    /// the folder no longer matches its integrity list (its figures are then not shown), `in
    /// progress` before the folder is sealed.
    verified: String,
    /// Why the folder fails its integrity check, when it does.
    integrity_error: Option<String>,
    /// The latest monitored batch's status (`stable`, `watch`, `act`) and when it was recorded.
    monitored: Option<String>,
    monitored_at: Option<String>,
}

fn listed(folder: &Path, verifications: &[VerificationEntry], monitoring: &[MonitoringEntry]) -> Result<Listed> {
    let Listing { record, sealed, integrity_error, selection, timing } = Listing::read(folder)?;
    let verified = match verifications.iter().rev().find(|v| v.fingerprint == record.fingerprint) {
        _ if integrity_error.is_some() => "TAMPERED",
        _ if !sealed => "in progress",
        Some(v) if v.identical => "yes",
        Some(_) => "FAILED",
        None => "no",
    };
    let selected = selection
        .as_ref()
        .and_then(|s| s.selected_summary())
        .map(|c| config_label(&c.overrides, c.baseline))
        .unwrap_or_else(|| if integrity_error.is_some() { "-".into() } else { "(not selected yet)".into() });
    let latest = monitoring.iter().rev().find(|m| m.fingerprint == record.fingerprint);
    Ok(Listed {
        monitored: latest.map(|m| m.status.clone()),
        monitored_at: latest.map(|m| m.time.clone()),
        folder: crate::store::folder_name(folder),
        fingerprint: record.fingerprint,
        name: record.name,
        trained_at: timing.map(|t| t.trained_at),
        selected,
        metric: selection.as_ref().map(|s| s.metric.clone()).unwrap_or_default(),
        test_value: selection.as_ref().and_then(|s| s.test.metrics.get(&s.metric).copied().flatten()),
        verified: verified.to_string(),
        integrity_error,
    })
}

pub fn run(results_root: &Path) -> Result<super::Report> {
    let entries = std::fs::read_dir(results_root).map_err(|e| Error::io(results_root, "read the results root", e))?;
    let mut folders: Vec<_> = entries.flatten().map(|e| e.path()).filter(|p| Listing::is_results_folder(p)).collect();
    folders.sort();
    let verifications = read_verifications(results_root)?;
    let monitoring = read_monitoring(results_root)?;
    let mut listed_ok = Vec::new();
    let mut problems = Vec::new();
    for folder in &folders {
        match listed(folder, &verifications, &monitoring) {
            Ok(l) => listed_ok.push(l),
            Err(e) => problems.push(format!("{}: {e}", folder.display())),
        }
    }
    let mut out = String::new();
    if listed_ok.is_empty() && problems.is_empty() {
        let _ = writeln!(out, "no experiments in {}", results_root.display());
    } else {
        let _ = writeln!(
            out,
            "{:<16}  {:<28} {:<20}  {:<32} {:<24} {:<11} monitored",
            "fingerprint", "experiment", "trained at", "selected configuration", "test metric", "verified"
        );
        for l in &listed_ok {
            let headline = l.test_value.map(|v| format!("{} {}", l.metric, fixed(v, 4))).unwrap_or_else(|| "-".into());
            let _ = writeln!(
                out,
                "{:<16}  {:<28} {:<20}  {:<32} {:<24} {:<11} {}",
                l.folder,
                terminal_cell(&l.name, 28),
                l.trained_at.as_deref().unwrap_or("-"),
                terminal_cell(&l.selected, 32),
                headline,
                l.verified,
                match (&l.monitored, &l.monitored_at) {
                    (Some(s), Some(t)) => format!("{s} ({t})"),
                    _ => "-".into(),
                }
            );
        }
        for l in listed_ok.iter().filter(|l| l.integrity_error.is_some()) {
            let _ =
                writeln!(out, "TAMPERED {}: {}", l.folder, crate::text::terminal_safe(l.integrity_error.as_deref().unwrap_or_default()));
        }
        for p in &problems {
            let _ = writeln!(out, "unreadable: {}", crate::text::terminal_safe(p));
        }
    }
    let json = serde_json::json!({ "experiments": listed_ok, "unreadable": problems });
    Ok(super::Report { text: out, json })
}
