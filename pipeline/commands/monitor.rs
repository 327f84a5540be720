//! `tabcard monitor <results folder or manifest> <batch.parquet> [--outcomes]`: a batch of new rows
//! against the reference population stored at training time, and its outcomes when the batch
//! holds the target; recorded as `monitoring/batch-<hash>/` beside the evidence and one line of
//! `monitoring.jsonl`. The same batch again is recognised by its SHA-256: it is monitored anew and
//! must reproduce its record byte for byte; nothing is written. `monitor --history <target>` prints
//! every recorded batch in the order recorded.

use std::fmt::Write;
use std::path::{Path, PathBuf};

use crate::data::parquet::ParquetSource;
use crate::error::{Error, Result};
use crate::format::sig;
use crate::manifest::Task;
use crate::monitor::batch::{check_schema, require_profile, tally, TargetKind};
use crate::monitor::record::{markdown, record_name, trend_svg, Recorded, READING, RECORDED, REPORT, TREND};
use crate::monitor::report::{assemble, Identity, MonitorReport, PopulationCheck};
use crate::monitor::status::Thresholds;
use crate::results::Sealed;
use crate::selection::serving::Deployed;
use crate::store::ledger::{append_monitoring, MonitoringEntry};
use crate::text::{terminal_cell, terminal_safe};

pub struct MonitorOptions {
    /// Where a manifest's results folder is looked up, and where `monitoring.jsonl` is.
    pub results_root: PathBuf,
    /// Require the target column and compare outcomes.
    pub outcomes: bool,
}

/// What `monitor` found.
pub struct MonitorOutcome {
    pub report: String,
    pub json: serde_json::Value,
    /// `stable`, `watch` or `act`; `None` for `--history`.
    pub status: Option<&'static str>,
    /// False when a batch monitored again did not reproduce its record.
    pub reproduced: bool,
}

/// The results folder a target names: the folder, or the one folder trained from the manifest
/// (found through the stored manifests' hashes; the training table is never read).
fn resolve(target: &Path, results_root: &Path) -> Result<PathBuf> {
    if !crate::manifest::is_manifest_path(target) {
        return Ok(target.to_path_buf());
    }
    let loaded = crate::manifest::load(target)?;
    let hash = crate::manifest::canonical_hash(&loaded.manifest);
    let found = crate::results::folders_of_manifest(results_root, &hash);
    match found.as_slice() {
        [one] => Ok(results_root.join(&one.folder)),
        [] => Err(Error::store(results_root, format!("holds no results folder trained from {} (train it first)", target.display()))),
        many => Err(Error::Usage(format!(
            "{} has {} results folders under {} (other data or tabcard versions): name one: {}",
            target.display(),
            many.len(),
            results_root.display(),
            many.iter()
                .map(|f| format!("{} (tabcard {})", results_root.join(&f.folder).display(), f.tool_version))
                .collect::<Vec<_>>()
                .join(", ")
        ))),
    }
}

/// Every recorded batch of the folder, oldest first.
fn recorded_history(folder: &Sealed) -> Result<Vec<(Recorded, MonitorReport)>> {
    let mut history = Vec::new();
    for record in folder.attached("monitoring")? {
        history.push((folder.attached_json::<Recorded>(&record, RECORDED)?, folder.attached_json::<MonitorReport>(&record, REPORT)?));
    }
    history.sort_by(|a, b| a.0.recorded_at.cmp(&b.0.recorded_at).then_with(|| a.1.batch_sha256.cmp(&b.1.batch_sha256)));
    Ok(history)
}

fn seed_of(split_seed: u64, batch_sha256: &str) -> u64 {
    split_seed ^ u64::from_str_radix(&batch_sha256[..16.min(batch_sha256.len())], 16).unwrap_or(0)
}

fn population_line(out: &mut String, p: &PopulationCheck) {
    let _ = writeln!(
        out,
        "  {:<28} PSI {:>9}  p {:>9}  {}",
        terminal_cell(&p.column, 28),
        sig(p.stability.psi, 3),
        sig(p.stability.p_value, 3),
        p.verdict.status.as_str()
    );
}

fn text_of(report: &MonitorReport, recorded: &Recorded, where_: &str) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "batch    {} ({} rows, SHA-256 {})", terminal_safe(&recorded.batch_file), report.rows, report.batch_sha256);
    let _ = writeln!(out, "model    {} ({})", terminal_safe(&report.experiment), report.fingerprint);
    let _ = writeln!(
        out,
        "populations (watch at PSI {}, act at {}, each only with chi-square p < {}):",
        report.thresholds.psi_watch, report.thresholds.psi_act, report.thresholds.alpha
    );
    population_line(&mut out, &report.score);
    for f in &report.features {
        population_line(&mut out, f);
    }
    if let Some(o) = &report.outcomes {
        let _ = writeln!(out, "outcomes on {} labelled rows ({} unlabelled):", o.rows, o.unlabelled);
        for m in &o.metrics {
            let _ = writeln!(out, "  {:<8} {}", m.verdict.status.as_str(), terminal_safe(&m.verdict.reason));
        }
        for c in &o.calibration {
            let _ = writeln!(out, "  {:<8} {}", c.verdict.status.as_str(), terminal_safe(&c.verdict.reason));
        }
    }
    let _ = writeln!(out, "overall  {}: {}", report.overall.status.as_str().to_uppercase(), terminal_safe(&report.overall.reason));
    let _ = writeln!(out, "{where_}");
    out
}

/// Monitors `batch` against the folder `target` names.
pub fn run(target: &Path, batch: &Path, options: &MonitorOptions) -> Result<MonitorOutcome> {
    let folder_path = resolve(target, &options.results_root)?;
    let folder = Sealed::open(&folder_path)?;
    let profile = require_profile(folder.profile()?, &folder_path, folder.layout_version)?;
    let manifest = folder.manifest()?;
    let selection = folder.selection()?;
    let summary = folder.summary()?;
    let preprocessor = folder.preprocessor()?;
    let record = &folder.record;
    let source = ParquetSource::open(batch)?;
    check_schema(&source, &profile, &summary)?;
    let target_column = manifest.data.target.clone();
    let has_target = source.names().contains(&target_column);
    if options.outcomes && !has_target {
        return Err(Error::data(
            batch,
            Some(&target_column),
            "is missing: --outcomes compares the batch's outcomes, which this column holds",
        ));
    }
    let (batch_sha256, _) = source.file_sha256()?;
    let name = record_name(&batch_sha256);
    let members: Vec<String> = match &selection.ensemble {
        Some(e) => e.members.clone(),
        None => vec![selection.selected_run.clone()],
    };
    let runs = members.iter().map(|id| folder.run(id)).collect::<Result<Vec<_>>>()?;
    let mut model = Deployed::load(&selection, &runs)?;
    let task = record.task;
    let kind = match task {
        Task::Regression => TargetKind::Values,
        _ => TargetKind::Classes(&record.class_labels),
    };
    let counted = tally(&source, &profile, &preprocessor, &mut model, task, has_target.then_some((target_column.as_str(), kind)))?;
    let thresholds = Thresholds::of(&manifest);
    let seed = seed_of(manifest.split.seed, &batch_sha256);
    let threshold = (task == Task::Binary).then(|| selection.deployed_threshold(folder.layout_version).value);
    let outcomes = counted.observed.as_ref().map(|observed| {
        crate::monitor::outcomes::judge(
            observed,
            model.head(),
            &selection,
            &record.class_labels,
            threshold,
            model.target_std(),
            &profile.calibration,
            manifest.selection.bootstrap,
            seed,
            thresholds.alpha,
            // The folder's own order, so a batch monitored again reproduces its record.
            crate::metrics::bootstrap::ResampleOrder::of_layout(folder.layout_version),
        )
    });
    let id = Identity {
        experiment: &record.name,
        fingerprint: &record.fingerprint,
        results_digest: &folder.digest,
        batch_sha256: &batch_sha256,
    };
    let report = assemble(id, &profile, counted, outcomes, thresholds);
    let status = report.overall.status.as_str();
    let mut history = recorded_history(&folder)?;
    let json_of = |recorded: &Recorded, record_path: &Path, reproduced: Option<bool>| {
        serde_json::json!({
            "record": record_path.display().to_string(),
            "recorded": recorded,
            "reproduced": reproduced,
            "report": report,
        })
    };
    if let Some((recorded, stored)) = history.iter().find(|(_, r)| r.batch_sha256 == batch_sha256) {
        let record_path = folder_path.join("monitoring").join(&name);
        let reproduced = stored == &report;
        let verdict = if reproduced {
            format!(
                "already recorded in {} on {}: monitored again, the report reproduces it bit for bit; nothing written",
                record_path.display(),
                recorded.recorded_at
            )
        } else {
            format!(
                "already recorded in {} on {}: monitored again, the report DIFFERS from the record; nothing written",
                record_path.display(),
                recorded.recorded_at
            )
        };
        return Ok(MonitorOutcome {
            report: text_of(&report, recorded, &verdict),
            json: json_of(recorded, &record_path, Some(reproduced)),
            status: Some(status),
            reproduced,
        });
    }
    let recorded = Recorded {
        recorded_at: crate::provenance::now_rfc3339(),
        tool_version: env!("CARGO_PKG_VERSION").into(),
        batch_file: batch.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default(),
    };
    history.push((recorded.clone(), report.clone()));
    let report_json = serde_json::to_vec_pretty(&report).map_err(|e| Error::Internal(format!("monitoring report: {e}")))?;
    let recorded_json = serde_json::to_vec_pretty(&recorded).map_err(|e| Error::Internal(format!("monitoring record: {e}")))?;
    let reading = markdown(&report, &recorded);
    let trend = trend_svg(&history);
    let attached = crate::store::attached::attach(
        &folder_path,
        "monitoring",
        &name,
        &[(REPORT, &report_json), (RECORDED, &recorded_json), (READING, reading.as_bytes()), (TREND, trend.as_bytes())],
    )?;
    let worst = report.worst_feature_psi();
    append_monitoring(
        folder_path.parent().unwrap_or(Path::new(".")),
        &MonitoringEntry {
            time: recorded.recorded_at.clone(),
            fingerprint: record.fingerprint.clone(),
            results: crate::store::folder_name(&folder_path),
            record: name.clone(),
            batch_sha256: batch_sha256.clone(),
            rows: report.rows,
            status: status.to_string(),
            worst_feature: worst.map(|w| w.0.to_string()),
            worst_psi: worst.map(|w| w.1),
            score_psi: report.score.stability.psi,
            record_digest: attached.digest.clone(),
        },
    )?;
    let record_path = folder_path.join("monitoring").join(&name);
    let where_ = format!("recorded {} (sealed by contents.sha256, digest {})", record_path.display(), attached.digest);
    Ok(MonitorOutcome {
        report: text_of(&report, &recorded, &where_),
        json: json_of(&recorded, &record_path, None),
        status: Some(status),
        reproduced: true,
    })
}

/// `monitor --history`: every recorded batch of the folder, oldest first, with its status and
/// stability indices.
pub fn history(target: &Path, results_root: &Path) -> Result<MonitorOutcome> {
    let folder_path = resolve(target, results_root)?;
    let folder = Sealed::open(&folder_path)?;
    let history = recorded_history(&folder)?;
    let mut out = String::new();
    if history.is_empty() {
        let _ = writeln!(out, "no batches monitored for {}", folder_path.display());
    } else {
        let _ =
            writeln!(out, "{:<26} {:<23} {:>9} {:<7} {:>9}  largest feature PSI", "recorded at", "record", "rows", "status", "score PSI");
        for (recorded, r) in &history {
            let worst =
                r.worst_feature_psi().map(|(c, v)| format!("{} ({})", sig(v, 3), terminal_cell(c, 28))).unwrap_or_else(|| "-".into());
            let _ = writeln!(
                out,
                "{:<26} {:<23} {:>9} {:<7} {:>9}  {}",
                recorded.recorded_at,
                record_name(&r.batch_sha256),
                r.rows,
                r.overall.status.as_str(),
                sig(r.score.stability.psi, 3),
                worst
            );
        }
    }
    let batches: Vec<serde_json::Value> = history
        .iter()
        .map(|(recorded, r)| {
            serde_json::json!({
                "recorded": recorded,
                "record": record_name(&r.batch_sha256),
                "rows": r.rows,
                "status": r.overall.status,
                "reason": r.overall.reason,
                "score_psi": r.score.stability.psi,
                "features": r.features.iter().map(|f| serde_json::json!({"column": f.column, "psi": f.stability.psi, "p_value": f.stability.p_value, "status": f.verdict.status})).collect::<Vec<_>>(),
            })
        })
        .collect();
    Ok(MonitorOutcome {
        report: out,
        json: serde_json::json!({ "folder": folder_path.display().to_string(), "batches": batches }),
        status: None,
        reproduced: true,
    })
}
