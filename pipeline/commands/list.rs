//! `tabcard list [--results DIR]`: every experiment folder in a results root, oldest training
//! first, with its fingerprint, name, manifest, training date, selected configuration, headline
//! test figure, what its latest verification checked, its latest monitoring status, and the
//! card's own warning when it says not to use the model.

use std::fmt::Write;
use std::path::Path;

use crate::card::sections::results::{DO_NOT_USE, PREFER_BASELINE};
use crate::error::{Error, Result};
use crate::experiment::plan::config_label;
use crate::format::fixed;
use crate::results::Listing;
use crate::store::ledger::{read_monitoring, read_verifications, MonitoringEntry, VerificationEntry};
use crate::text::terminal_cell;

/// What is known of a folder's verification.
#[derive(serde::Serialize)]
struct Verified {
    /// `yes`, `FAILED` or `no`, from the latest verification of this fingerprint; `TAMPERED` when
    /// the folder no longer matches its integrity list (its figures are then not shown), `in
    /// progress` before the folder is sealed.
    status: String,
    /// The latest verification line (`verifications.jsonl`): when, runs checked of runs planned,
    /// `--all` or not, the verifying tabcard and machine.
    latest: Option<VerificationEntry>,
}

/// One listed experiment.
#[derive(serde::Serialize)]
struct Listed {
    folder: String,
    fingerprint: String,
    name: String,
    /// The manifest's path in its project, as recorded at training.
    manifest: String,
    trained_at: Option<String>,
    selected: String,
    metric: String,
    test_value: Option<f64>,
    verified: Verified,
    /// Why the folder fails its integrity check, when it does.
    integrity_error: Option<String>,
    /// The latest monitored batch's status (`stable`, `watch`, `act`) and when it was recorded.
    monitored: Option<String>,
    monitored_at: Option<String>,
    /// `do not use` or `prefer the linear baseline` when the card says so.
    card_warning: Option<String>,
}

fn listed(folder: &Path, verifications: &[VerificationEntry], monitoring: &[MonitoringEntry]) -> Result<Listed> {
    let Listing { record, sealed, integrity_error, selection, timing, card } = Listing::read(folder)?;
    let latest = verifications.iter().rev().find(|v| v.fingerprint == record.fingerprint);
    let status = match latest {
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
    let card_warning = card.as_deref().and_then(|c| {
        if c.contains(DO_NOT_USE) {
            Some("do not use".to_string())
        } else if c.contains(PREFER_BASELINE) {
            Some("prefer the linear baseline".to_string())
        } else {
            None
        }
    });
    let monitored = monitoring.iter().rev().find(|m| m.fingerprint == record.fingerprint);
    Ok(Listed {
        monitored: monitored.map(|m| m.status.clone()),
        monitored_at: monitored.map(|m| m.time.clone()),
        folder: crate::store::folder_name(folder),
        fingerprint: record.fingerprint,
        name: record.name,
        manifest: record.location.manifest_path.clone(),
        trained_at: timing.map(|t| t.trained_at),
        selected,
        metric: selection.as_ref().map(|s| s.metric.clone()).unwrap_or_default(),
        test_value: selection.as_ref().and_then(|s| s.test.metrics.get(&s.metric).copied().flatten()),
        verified: Verified { status: status.to_string(), latest: latest.filter(|_| integrity_error.is_none() && sealed).cloned() },
        integrity_error,
        card_warning,
    })
}

fn verified_text(v: &Verified) -> String {
    match &v.latest {
        Some(entry) if v.status == "yes" || v.status == "FAILED" => format!("{}: {}", v.status, entry.describe()),
        _ => v.status.clone(),
    }
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
    // Oldest training first (the order of the ledger); folders without a time last.
    listed_ok.sort_by(|a, b| (a.trained_at.is_none(), &a.trained_at, &a.folder).cmp(&(b.trained_at.is_none(), &b.trained_at, &b.folder)));
    let mut out = String::new();
    if listed_ok.is_empty() && problems.is_empty() {
        let _ = writeln!(out, "no experiments in {}", results_root.display());
    } else {
        let _ = writeln!(
            out,
            "{:<20}  {:<16}  {:<24} {:<28} {:<24} {:<22} {:<30} monitored",
            "trained at", "fingerprint", "experiment", "manifest", "selected configuration", "test metric", "verified"
        );
        for l in &listed_ok {
            let headline = l.test_value.map(|v| format!("{} {}", l.metric, fixed(v, 4))).unwrap_or_else(|| "-".into());
            let _ = writeln!(
                out,
                "{:<20}  {:<16}  {:<24} {:<28} {:<24} {:<22} {:<30} {}",
                l.trained_at.as_deref().unwrap_or("-"),
                l.folder,
                terminal_cell(&l.name, 24),
                terminal_cell(&l.manifest, 28),
                terminal_cell(&l.selected, 24),
                headline,
                verified_text(&l.verified),
                match (&l.monitored, &l.monitored_at) {
                    (Some(s), Some(t)) => format!("{s} ({t})"),
                    _ => "-".into(),
                }
            );
        }
        for l in listed_ok.iter().filter(|l| l.card_warning.is_some()) {
            let _ =
                writeln!(out, "WARNING {}: its card says {} (see its card.md)", l.folder, l.card_warning.as_deref().unwrap_or_default());
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
