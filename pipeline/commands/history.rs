//! `tabcard history [--results DIR]`: the ledger: every completed selection with its time,
//! experiment, fingerprint, git commit, selected metric, what its latest verification checked
//! (runs of runs planned, when), its latest monitoring status, and whether its recorded reviews
//! hold today against the allowed-signers file.

use std::fmt::Write;
use std::path::Path;

use std::collections::BTreeMap;

use crate::error::Result;
use crate::format::fixed;
use crate::review::judge::Judgement;
use crate::store::ledger::{read, read_monitoring, read_verifications};
use crate::text::terminal_cell;

pub fn run(results_root: &Path, allowed_signers: Option<&Path>) -> Result<super::Report> {
    let entries = read(results_root)?;
    let verifications = read_verifications(results_root)?;
    let monitoring = read_monitoring(results_root)?;
    let signers = crate::review::allowed_signers::locate(allowed_signers, results_root)?;
    // Reviews are judged for each experiment's latest selection: its digest is the folder's.
    let mut reviews: BTreeMap<String, Vec<Judgement>> = BTreeMap::new();
    for (i, e) in entries.iter().enumerate() {
        let latest = !entries[i + 1..].iter().any(|later| later.fingerprint == e.fingerprint);
        let folder = results_root.join(&e.results);
        if let (true, Some(digest), true) = (latest, &e.results_digest, folder.is_dir()) {
            let judged = super::review::judge_reviews(&folder, &e.fingerprint, digest, signers.as_ref())?;
            if !judged.is_empty() {
                reviews.insert(e.fingerprint.clone(), judged);
            }
        }
    }
    let json = serde_json::json!({
        "selections": entries,
        "verifications": verifications,
        "monitoring": monitoring,
        "reviews": reviews,
        "allowed_signers": signers.as_ref().map(|s| s.path.display().to_string()),
    });
    let mut out = String::new();
    if entries.is_empty() {
        let _ = writeln!(out, "no experiments recorded in {}", results_root.display());
        return Ok(super::Report { text: out, json });
    }
    let _ = writeln!(
        out,
        "{:<20}  {:<28} {:<16} {:<10} {:>6} {:>6}  {:<22} {:<28} {:<24} reviews",
        "time", "experiment", "fingerprint", "commit", "new", "reused", "selected metric", "verified", "monitored"
    );
    let reviewed = |fingerprint: &str| match reviews.get(fingerprint) {
        None => "-".to_string(),
        Some(r) => {
            let holding = r.iter().filter(|j| j.holds()).count();
            if holding == r.len() {
                format!("{holding} hold")
            } else {
                format!("{holding} of {} hold", r.len())
            }
        }
    };
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
            "{:<20}  {:<28} {:<16} {:<10} {:>6} {:>6}  {:<22} {:<28} {:<24} {}",
            e.time,
            terminal_cell(&e.experiment, 28),
            &e.fingerprint[..16],
            commit,
            e.runs_trained,
            e.runs_reused,
            metric,
            verified,
            latest_monitoring(&e.fingerprint),
            reviewed(&e.fingerprint)
        );
    }
    for (fingerprint, judged) in &reviews {
        let _ = writeln!(out, "\nreviews of {}:", &fingerprint[..16.min(fingerprint.len())]);
        crate::commands::verify::reviews_lines(&mut out, judged, signers.as_ref());
    }
    Ok(super::Report { text: out, json })
}
