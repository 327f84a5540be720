//! `tabcard check <manifest>`: validate the manifest and the data, print fingerprints, the data
//! summary, the run plan and its memory estimate (an infeasible plan is an error here already).

use std::fmt::Write;
use std::path::Path;

use crate::data::roles::Role;
use crate::error::Result;
use crate::experiment::plan;
use crate::experiment::{open, Experiment};
use crate::text::terminal_safe;

/// Checks the experiment; `jobs` is the worker count the memory estimate assumes.
pub fn run(manifest_path: &Path, jobs: usize) -> Result<super::Report> {
    let exp = open(manifest_path)?;
    let plan = plan::build(&exp.manifest, &exp.run_naming())?;
    crate::experiment::feasibility::require_calibration_rows(&exp)?;
    crate::experiment::feasibility::require_known_features(&exp)?;
    let estimate = crate::experiment::feasibility::estimate(&exp, &plan, exp.preprocessor.width(), jobs);
    let available = crate::memory::available_bytes();
    crate::experiment::feasibility::require(&estimate, available, manifest_path)?;
    let mut out = report(&exp, &plan);
    let _ = writeln!(out, "memory       {}", crate::experiment::feasibility::describe(&estimate, available));
    let m = &exp.manifest;
    let json = serde_json::json!({
        "experiment": m.experiment.name,
        "manifest": exp.manifest_path.display().to_string(),
        "fingerprint": exp.fingerprint,
        "manifest_sha256": exp.manifest_sha256,
        "tool_version": crate::experiment::TOOL_VERSION,
        "data": { "path": exp.data.path, "file_sha256": exp.data.file_sha256, "content_sha256": exp.data.content_sha256,
                  "bytes": exp.data.bytes, "outside_project": exp.data_outside_project },
        "split": { "train": exp.splits.train.len(), "validation": exp.splits.validation.len(), "test": exp.splits.test.len() },
        "summary": exp.summary,
        "plan": { "runs": plan.runs.len(), "configurations": plan.configs.len(), "grid": m.sweep.grid, "seeds": m.sweep.seeds },
        "selection": { "metric": m.selection.metric, "rule": m.selection.rule.as_str() },
        "overridden_by_grid": exp.overridden_by_grid,
        "memory": { "bytes_needed": estimate.total, "bytes_available": available },
    });
    Ok(super::Report { text: out, json })
}

/// Tables wider than this show their first `SHOWN_COLUMNS` columns; the rest are counted.
const WIDE_TABLE: usize = 60;
const SHOWN_COLUMNS: usize = 40;
/// Warnings beyond this many are counted, not printed.
const SHOWN_WARNINGS: usize = 20;

fn num(x: f64) -> String {
    crate::format::sig(x, 4)
}

pub fn report(exp: &Experiment, plan: &plan::Plan) -> String {
    let m = &exp.manifest;
    let mut out = String::new();
    let _ = writeln!(out, "experiment   {}", terminal_safe(&m.experiment.name));
    let _ = writeln!(out, "manifest     {}", exp.manifest_path.display());
    let _ = writeln!(out, "fingerprint  {}", exp.fingerprint);
    let _ = writeln!(out, "  manifest   sha256 {} (canonical, defaults filled)", exp.manifest_sha256);
    let _ = writeln!(out, "  data file  sha256 {} ({} bytes)", exp.data.file_sha256, exp.data.bytes);
    let _ = writeln!(out, "  data rows  sha256 {} (schema and values)", exp.data.content_sha256);
    let _ = writeln!(out, "  tool       tabcard {}", crate::experiment::TOOL_VERSION);
    if exp.data_outside_project {
        let _ = writeln!(out, "note: the data file lies outside the project that holds the manifest (its git work tree, or its folder outside git), so it does not travel with a checkout: {}", terminal_safe(&exp.data_path.display().to_string()));
    }
    let s = &exp.summary;
    let _ = writeln!(out, "\ndata         {} ({} rows, {} columns)", exp.data_path.display(), s.rows, s.columns.len());
    let stratified = m.split.stratify && m.data.task != crate::manifest::Task::Regression;
    let method = match (&m.split.column, &m.split.group) {
        (Some(c), _) => format!("given by column {}", terminal_safe(c)),
        (None, Some(g)) => {
            format!("whole groups of {}, seed {}{}", terminal_safe(g), m.split.seed, if stratified { ", stratified" } else { "" })
        }
        (None, None) => format!("rows, seed {}, {}", m.split.seed, if stratified { "stratified" } else { "random" }),
    };
    let _ = writeln!(
        out,
        "split        train {} / validation {} / test {} ({method})",
        exp.splits.train.len(),
        exp.splits.validation.len(),
        exp.splits.test.len()
    );
    let checks = s.split_checks.clone().unwrap_or_default();
    let _ = writeln!(
        out,
        "duplicates   {} rows repeat an earlier row (features and target); {} test and {} validation rows repeat a training row",
        s.duplicate_rows.unwrap_or(0),
        checks.test_rows_duplicating_training,
        checks.validation_rows_duplicating_training
    );
    for k in checks.repeated_keys.iter().filter(|k| k.crossing > 0) {
        let _ = writeln!(
            out,
            "note: {} repeats across splits: {} of {} values occur in more than one split (set [split] group to keep them together)",
            terminal_safe(&k.column),
            k.crossing,
            k.values
        );
    }
    if !checks.constant_on_training.is_empty() {
        let _ = writeln!(out, "note: constant on the training rows: {}", terminal_safe(&checks.constant_on_training.join(", ")));
    }
    for note in &exp.overridden_by_grid {
        let _ = writeln!(out, "note: {}", terminal_safe(note));
    }
    let _ = writeln!(out, "\n{:<28} {:<9} {:<8} {:>8}  summary", "column", "role", "type", "missing");
    let shown = if s.columns.len() > WIDE_TABLE { SHOWN_COLUMNS } else { s.columns.len() };
    for c in &s.columns[..shown] {
        let detail = match &c.numeric {
            Some(n) if c.kind == "boolean" => format!("true in {:.1}% of rows", 100.0 * n.mean),
            Some(n) => {
                format!("min {} / median {} / max {}, mean {} sd {}", num(n.min), num(n.median), num(n.max), num(n.mean), num(n.std))
            }
            None => {
                let top: Vec<String> =
                    c.top_levels.iter().take(3).map(|l| format!("{} ({})", crate::text::terminal_cell(&l.level, 24), l.count)).collect();
                format!("{} levels: {}", c.distinct, top.join(", "))
            }
        };
        let kind = if c.categorical && c.kind != "string" { format!("{}*", c.kind) } else { c.kind.clone() };
        let _ = writeln!(
            out,
            "{:<28} {:<9} {:<8} {:>7.1}%  {}",
            crate::text::terminal_cell(&c.name, 28),
            c.role,
            kind,
            100.0 * c.missing_share,
            detail
        );
    }
    if shown < s.columns.len() {
        let roles = |r: Role| s.columns[shown..].iter().filter(|c| c.role == r).count();
        let _ = writeln!(
            out,
            "... and {} more columns ({} features, {} others): `check --json` lists every column, as does data-summary.json in the results folder",
            s.columns.len() - shown,
            roles(Role::Feature),
            s.columns.len() - shown - roles(Role::Feature)
        );
    }
    let _ = writeln!(out, "types marked * are numeric columns treated as categories (data.categorical); missing is the share of null rows");
    let _ = writeln!(out, "\ntarget       {} ({})", terminal_safe(&s.target.name), m.data.task.as_str());
    for l in &s.target.classes {
        let _ = writeln!(out, "  {:<24} {:>8} rows ({:.1}%)", terminal_safe(&l.level), l.count, 100.0 * l.count as f64 / s.rows as f64);
    }
    if let Some(d) = &s.target.distribution {
        let _ =
            writeln!(out, "  min {} / q25 {} / median {} / q75 {} / max {}", num(d.min), num(d.q25), num(d.median), num(d.q75), num(d.max));
    }
    if !s.warnings.is_empty() {
        let _ = writeln!(out, "\nwarnings");
        for w in s.warnings.iter().take(SHOWN_WARNINGS) {
            let _ = writeln!(out, "  - {}", terminal_safe(w));
        }
        if s.warnings.len() > SHOWN_WARNINGS {
            let _ = writeln!(out, "  ... and {} more (`check --json` lists them all)", s.warnings.len() - SHOWN_WARNINGS);
        }
    }
    let grid_points = plan.configs.iter().filter(|c| !c.baseline).count();
    let _ = writeln!(
        out,
        "\nplan         {} runs = {} configuration(s) x {} seed(s){}",
        plan.runs.len(),
        grid_points,
        m.sweep.seeds.len(),
        if m.selection.baseline { format!(" + linear baseline x {} seed(s)", m.sweep.seeds.len()) } else { String::new() }
    );
    for (key, values) in &m.sweep.grid {
        let vals: Vec<String> = values.iter().map(|v| v.to_string()).collect();
        let _ = writeln!(out, "  {key} in [{}]", vals.join(", "));
    }
    let _ = writeln!(
        out,
        "selection    validation {} ({})",
        m.selection.metric,
        match crate::metrics::registry::direction(m.data.task, &m.selection.metric) {
            Some(crate::metrics::registry::Direction::Maximise) => "higher is better",
            _ => "lower is better",
        }
    );
    out
}
