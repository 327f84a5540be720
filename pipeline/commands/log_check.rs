//! `tabcard log-check <decision log> [--results DIR]`: checks a decision log that `predict --log`
//! kept: every line's link to the line before it, then every chain head the scoring results
//! folders recorded (under `decisions/`), so an edited or removed line, a removed tail and a
//! rewritten chain are each named. Exit 0 when the log holds, 6 when it does not.

use std::collections::BTreeSet;
use std::fmt::Write;
use std::path::Path;

use crate::error::{Error, Result};
use crate::store::decision_log::{check_chain, recorded_heads, LogLine, KIND};

pub struct LogCheckOutcome {
    pub report: String,
    pub holds: bool,
    pub json: serde_json::Value,
}

/// What is wrong with the log beside its chain, from the heads one results folder recorded.
fn head_problems(lines: &[LogLine], results_root: &Path, folder: &str, chain: &str) -> Result<Vec<String>> {
    let root = results_root.join(folder);
    if !root.is_dir() {
        return Ok(vec![format!("the results folder {} that scored lines of this log is not there to hold its heads", root.display())]);
    }
    let heads = recorded_heads(&root, chain)?;
    let mut problems = Vec::new();
    if heads.is_empty() {
        problems.push(format!(
            "{} records no head of chain {chain}: every `predict --log` records one, so this log was rewritten (a new chain) or the heads removed",
            root.join(KIND).display()
        ));
    }
    for head in &heads {
        let at = head.seq as usize;
        match lines.get(at.wrapping_sub(1)) {
            None => problems.push(format!(
                "{} recorded line {at} (at {}), but the log ends at line {}: its tail was removed",
                root.display(),
                head.time,
                lines.len()
            )),
            Some(line) => {
                let text = serde_json::to_string(line).unwrap_or_default();
                let hash = crate::fingerprint::sha256_hex(text.as_bytes());
                if hash != head.line_sha256 {
                    problems.push(format!(
                        "line {at} hashes to {hash}, but {} recorded {} for it: the chain was rewritten",
                        root.display(),
                        head.line_sha256
                    ));
                }
            }
        }
    }
    Ok(problems)
}

pub fn run(log: &Path, results_root: &Path) -> Result<LogCheckOutcome> {
    let text = std::fs::read_to_string(log).map_err(|e| Error::io(log, "read the decision log", e))?;
    let mut out = String::new();
    let lines = match check_chain(&text) {
        Ok(lines) => lines,
        Err(b) => {
            let _ = writeln!(out, "log       {}: BROKEN at line {}: {}", log.display(), b.line, b.reason);
            let json = serde_json::json!({ "log": log.display().to_string(), "holds": false, "broken_line": b.line, "reason": b.reason });
            return Ok(LogCheckOutcome { report: out, holds: false, json });
        }
    };
    let Some(first) = lines.first() else {
        let _ = writeln!(out, "log       {}: empty", log.display());
        let json = serde_json::json!({ "log": log.display().to_string(), "holds": true, "lines": 0 });
        return Ok(LogCheckOutcome { report: out, holds: true, json });
    };
    let chain = first.chain.clone();
    let _ = writeln!(out, "chain     {chain}: {} lines, each linked to the one before", lines.len());
    let folders: BTreeSet<&str> = lines.iter().map(|l| l.results.as_str()).collect();
    let mut problems = Vec::new();
    for folder in &folders {
        problems.extend(head_problems(&lines, results_root, folder, &chain)?);
    }
    let rows: usize = lines.iter().map(|l| l.rows).sum();
    let _ = writeln!(
        out,
        "scored    {rows} rows in {} scorings by {} results folders, {} to {}",
        lines.len(),
        folders.len(),
        first.time,
        lines[lines.len() - 1].time
    );
    for p in &problems {
        let _ = writeln!(out, "BROKEN    {}", crate::text::terminal_safe(p));
    }
    let holds = problems.is_empty();
    let _ = writeln!(
        out,
        "verdict   {}",
        if holds {
            "the log holds: its chain is whole and matches every head its results folders recorded"
        } else {
            "the log does NOT hold"
        }
    );
    let json = serde_json::json!({
        "log": log.display().to_string(),
        "holds": holds,
        "chain": chain,
        "lines": lines.len(),
        "rows": rows,
        "problems": problems,
    });
    Ok(LogCheckOutcome { report: out, holds, json })
}
