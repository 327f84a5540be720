//! `tabcard train <manifest>`: resolve the experiment, train every pending run of its plan in
//! parallel, select and test the best configuration, write the card, append to the ledger.

use std::fmt::Write;
use std::path::{Path, PathBuf};
use std::time::Instant;

use crate::data::prep::Preprocessor;
use crate::error::{Error, Result};
use crate::experiment::plan::Plan;
use crate::experiment::prepared::Prepared;
use crate::experiment::{open, Experiment};
use crate::format::{fixed, mean_sd};
use crate::results::{Folder, Sealed};
use crate::selection::Selection;
use crate::store::ledger::{self, LedgerEntry};
use crate::store::timing::{phase, Phase, TimingRecord};
use crate::store::{write_atomic, write_json, FormatRecord, Layout};
use crate::sweep::shard::Shard;
use crate::sweep::{self, Event, SweepInputs};

#[derive(Clone)]
pub struct TrainOptions {
    pub results_root: PathBuf,
    pub jobs: usize,
    /// Train only this shard of the run list and stop there: no selection, card or ledger line
    /// until a run without a shard finds every run stored.
    pub shard: Option<Shard>,
}

/// What a train invocation did, for the caller's report and exit status.
pub struct TrainOutcome {
    pub report: String,
    pub results: PathBuf,
    pub failed_runs: usize,
    pub json: serde_json::Value,
}

fn runs_json(plan: &Plan, report: &sweep::SweepReport) -> serde_json::Value {
    serde_json::json!({
        "planned": plan.runs.len(),
        "trained": report.trained,
        "reused": report.reused,
        "copied": report.copied.iter().map(|c| serde_json::json!({ "run": c.run_id, "from": c.source })).collect::<Vec<_>>(),
        "failed": report.failed.iter().map(|(run, reason)| serde_json::json!({ "run": run, "reason": reason })).collect::<Vec<_>>(),
    })
}

/// Writes the experiment-level files once. A folder that already has them (`format.json`, written
/// last, says they are whole) must hold the same canonical manifest, and its files are never
/// written again: a later `train` of the same experiment (a comment added to the manifest, the
/// table re-encoded, the project copied elsewhere) keeps the originals. A sealed folder must also
/// still match its integrity list before anything else happens. Returns what it found.
fn prepare_folder(exp: &Experiment, layout: &Layout, plan: &Plan, preprocessor: &Preprocessor) -> Result<Folder> {
    let canonical = crate::manifest::canonical_json(&exp.manifest);
    let found = Folder::inspect(layout, &canonical)?;
    if !matches!(found, Folder::New) {
        return Ok(found);
    }
    crate::store::create_dir(&layout.root)?;
    write_atomic(&layout.manifest(), canonical.as_bytes())?;
    let source = std::fs::read(&exp.manifest_path).map_err(|e| Error::io(&exp.manifest_path, "read the manifest", e))?;
    write_atomic(&layout.manifest_source(), &source)?;
    write_json(&layout.experiment(), &exp.record())?;
    write_json(&layout.location(), &exp.location(&layout.root))?;
    write_json(&layout.data_summary(), &exp.summary)?;
    write_json(&layout.plan(), plan)?;
    write_json(&layout.preprocessor(), preprocessor)?;
    // format.json last: its presence tells a concurrent `train` that the other files are whole.
    write_json(&layout.format(), &FormatRecord::current())?;
    Ok(Folder::New)
}

fn table(selection: &Selection) -> String {
    let mut out = String::new();
    let m = &selection.metric;
    let _ = writeln!(
        out,
        "{:<36} {:>8} {:>6}  {:>20}  {:>22}",
        "configuration",
        "params",
        "seeds",
        format!("validation {m}"),
        "worse on validation by"
    );
    for c in &selection.configs {
        let v = c.validation.get(m).map(|s| mean_sd(s.mean, s.sd)).unwrap_or_else(|| "-".into());
        let g = c.gap.as_ref().map(|s| mean_sd(selection.worse_on_validation(s.mean), s.sd)).unwrap_or_else(|| "-".into());
        let mark = if c.config_id == selection.selected_config { " *" } else { "" };
        let seeds = if c.runs_failed > 0 { format!("{}+{}f", c.runs_completed, c.runs_failed) } else { c.runs_completed.to_string() };
        let _ = writeln!(
            out,
            "{:<36} {:>8} {:>6}  {:>20}  {:>22}{mark}",
            crate::text::terminal_safe(&crate::experiment::plan::config_label(&c.overrides, c.baseline)),
            c.parameter_count,
            seeds,
            v,
            g
        );
    }
    let failed_note = if selection.configs.iter().any(|c| c.runs_failed > 0) { "; seeds 2+1f: 2 completed, 1 failed" } else { "" };
    let _ = writeln!(out, "* selected ({} rule); ± is the standard deviation across seeds{failed_note}", selection.rule.as_str());
    let t = &selection.test;
    match &selection.ensemble {
        Some(e) => {
            let _ = writeln!(
                out,
                "\ndeployed: the mean of the {} seeds of the selected configuration (selected run {}, seed {}), test split ({} rows, evaluated once):",
                e.members.len(),
                t.run_id,
                t.seed,
                t.rows
            );
        }
        None => {
            let _ = writeln!(out, "\nselected run {} (seed {}), test split ({} rows, evaluated once):", t.run_id, t.seed, t.rows);
        }
    }
    for (name, value) in &t.metrics {
        let Some(v) = value else { continue };
        let ci = t.intervals.get(name).map(|i| format!("  95% CI [{}, {}]", fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_default();
        let _ = writeln!(out, "  {name:<18} {}{ci}", fixed(*v, 4));
    }
    out
}

/// The first lines of every `train` report, sharded or not: the experiment, what happened to
/// the runs (`runs`), and each failed run with its reason.
fn report_head(exp: &Experiment, runs: &str, report: &sweep::SweepReport) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "experiment {} ({})", crate::text::terminal_safe(&exp.manifest.experiment.name), exp.fingerprint);
    let _ = writeln!(out, "{runs}");
    for (id, why) in &report.failed {
        let _ = writeln!(out, "  run {id} {why}");
    }
    out
}

/// The report of a sharded invocation: what this shard did, and what completes the experiment.
fn shard_outcome(exp: &Experiment, plan: &Plan, shard: Shard, report: &sweep::SweepReport, layout: &Layout, jobs: usize) -> TrainOutcome {
    let runs = format!(
        "shard {shard}: {} of {} planned runs; {} trained, {} reused, {} failed ({jobs} workers)",
        shard.size(plan.runs.len()),
        plan.runs.len(),
        report.trained.len(),
        report.reused.len(),
        report.failed.len()
    );
    let mut out = report_head(exp, &runs, report);
    let _ = writeln!(out, "when every shard has finished, `tabcard train` without --shard selects, tests and writes the card");
    let _ = writeln!(out, "results  {}", layout.root.display());
    let json = serde_json::json!({
        "experiment": exp.manifest.experiment.name,
        "fingerprint": exp.fingerprint,
        "results": layout.root.display().to_string(),
        "shard": shard.to_string(),
        "runs": runs_json(plan, report),
    });
    TrainOutcome { report: out, results: layout.root.clone(), failed_runs: report.failed.len(), json }
}

/// Selects and tests from the stored runs, then writes `selection.json`, the timing record and the
/// card (which seals the folder). Returns the selection and the results digest.
fn select_and_record(
    prepared: &mut Prepared,
    layout: &Layout,
    git: &GitState,
    (jobs, threads): (usize, usize),
    started: Instant,
    mut phases: Vec<Phase>,
) -> Result<(Selection, String)> {
    let selecting = Instant::now();
    let runs = Folder::stored_runs(layout, &prepared.plan)?;
    let mut parts = Vec::new();
    let mut timed = |name: &str, since: &mut Instant| {
        parts.push(Phase::part(name, phase::SELECT, since.elapsed().as_secs_f64()));
        *since = Instant::now();
    };
    let mut since = Instant::now();
    // Frees the validation matrix before the test bootstrap (its last use is the threshold).
    let derived = crate::selection::derive(prepared, &runs, crate::store::FORMAT_VERSION)?;
    crate::memory::return_freed_memory();
    timed(phase::EVALUATE, &mut since);
    let prepared = &*prepared;
    let fairness = crate::analysis::fairness::derive(prepared, &derived)?;
    timed(phase::FAIRNESS, &mut since);
    let importance = crate::analysis::importance::derive(prepared, &derived, &runs, crate::store::FORMAT_VERSION)?;
    timed(phase::IMPORTANCE, &mut since);
    let sensitivity = crate::analysis::sensitivity::derive(prepared, &derived, &runs, importance.as_ref(), crate::store::FORMAT_VERSION)?;
    timed(phase::SENSITIVITY, &mut since);
    let profile = crate::analysis::profile::derive(prepared, &derived)?;
    timed(phase::PROFILE, &mut since);
    let crate::selection::Derived { selection, test_predictions, .. } = derived;
    phases.push(Phase::top(phase::SELECT, selecting.elapsed().as_secs_f64()));
    phases.extend(parts);
    crate::store::write_atomic(&layout.test_predictions(), test_predictions.as_bytes())?;
    write_json(&layout.selection(), &selection)?;
    if let Some(fairness) = &fairness {
        write_json(&layout.fairness(), fairness)?;
    }
    if let Some(importance) = &importance {
        write_json(&layout.importance(), importance)?;
    }
    write_json(&layout.sensitivity(), &sensitivity)?;
    write_json(&layout.profile(), &profile)?;
    let (git_commit, git_dirty) = git.clone();
    write_json(
        &layout.timing(),
        &TimingRecord {
            trained_at: crate::provenance::now_rfc3339(),
            git_commit,
            git_dirty,
            jobs,
            threads: Some(threads),
            wall_seconds: started.elapsed().as_secs_f64(),
            run_seconds: runs.iter().map(|r| (r.record.run_id.clone(), r.seconds())).collect(),
            phases,
            trained_by: crate::provenance::user_identity(&prepared.exp.manifest_path),
        },
    )?;
    let digest = crate::card::write_card(layout, None)?;
    Ok((selection, digest))
}

/// The manifest repository's (commit, uncommitted changes), as `provenance::git_state` gives them.
type GitState = (Option<String>, Option<bool>);

fn ledger_entry(
    exp: &Experiment,
    plan: &Plan,
    layout: &Layout,
    report: &sweep::SweepReport,
    selection: &Selection,
    results_digest: &str,
    git: &GitState,
) -> LedgerEntry {
    let (git_commit, git_dirty) = git.clone();
    LedgerEntry {
        time: crate::provenance::now_rfc3339(),
        experiment: exp.manifest.experiment.name.clone(),
        fingerprint: exp.fingerprint.clone(),
        results: crate::store::folder_name(&layout.root),
        git_commit,
        git_dirty,
        runs_planned: plan.runs.len(),
        runs_trained: report.trained.len(),
        runs_reused: report.reused.len(),
        runs_failed: report.failed.len(),
        selected_run: Some(selection.selected_run.clone()),
        selection_metric: selection.metric.clone(),
        selected_value: selection.test.metrics.get(&selection.metric).copied().flatten(),
        results_digest: Some(results_digest.to_string()),
        tool_version: crate::experiment::TOOL_VERSION.to_string(),
    }
}

/// When the manifest names the experiment this model replaces and its results folder is under the
/// results root, records `compare`'s report against it (`comparisons/replaces-<fp16>/`, an
/// attached record: the evidence and its digest do not change) and renders the card again to
/// show it. A folder whose fingerprint does not begin with `replaces` is not that experiment.
/// Returns the line the report prints; a replaced folder that cannot be compared (it fails its
/// integrity check, say) is named there and does not undo the training.
fn compare_with_replaced(replaces: &str, results_root: &Path, layout: &Layout) -> Result<String> {
    use crate::card::sections::replaced::{record_name, FILE, KIND};
    if replaces.is_empty() {
        return Ok(String::new());
    }
    let folder = results_root.join(replaces[..16].to_ascii_lowercase());
    let is_it = crate::results::fingerprint_of(&folder).is_some_and(|f| f.starts_with(&replaces.to_ascii_lowercase()));
    if !is_it {
        return Ok(format!(
            "replaces  {replaces}: no such results folder under {}, so no comparison was recorded\n",
            results_root.display()
        ));
    }
    if layout.root.join(KIND).join(record_name(replaces)).exists() {
        return Ok(String::new());
    }
    let report = match super::compare::run(&folder, &layout.root, results_root) {
        Ok(report) => report,
        Err(e) => return Ok(format!("replaces  {}: cannot be compared ({e}); no comparison was recorded\n", folder.display())),
    };
    let json = serde_json::to_vec_pretty(&report.json).map_err(|e| Error::Internal(format!("comparison: {e}")))?;
    let record = crate::store::attached::attach(
        &layout.root,
        KIND,
        &record_name(replaces),
        &[(FILE, &json), ("compare.txt", report.text.as_bytes())],
    )?;
    crate::card::write_card(layout, None)?;
    Ok(format!("replaces  {}: compared, recorded in {KIND}/{} and shown in the card\n", folder.display(), record.name))
}

/// The terminal report of a completed `train`.
#[allow(clippy::too_many_arguments)]
fn summary(
    exp: &Experiment,
    plan: &Plan,
    layout: &Layout,
    report: &sweep::SweepReport,
    selection: &Selection,
    results_digest: &str,
    nothing_new: bool,
    jobs: usize,
) -> String {
    let runs = if nothing_new {
        format!("nothing to train: all {} runs are stored and complete; results unchanged", report.reused.len())
    } else {
        let copied = match report.copied.len() {
            0 => String::new(),
            n => format!(" ({n} of them copied from other experiments' folders)"),
        };
        format!(
            "runs: {} trained, {} reused{copied}, {} failed, {} planned ({jobs} workers)",
            report.trained.len(),
            report.reused.len(),
            report.failed.len(),
            plan.runs.len()
        )
    };
    let mut out = report_head(exp, &runs, report);
    let _ = writeln!(out);
    out.push_str(&table(selection));
    let _ = writeln!(out, "\nresults  {}", layout.root.display());
    let _ = writeln!(out, "card     {}", layout.card().display());
    let _ = writeln!(
        out,
        "digest   {results_digest} (results digest: `sha256sum integrity.sha256`; `sha256sum -c integrity.sha256 records.sha256` in the results folder checks every file)"
    );
    out
}

/// Orchestrates `train`: resolve and check the experiment, hold the writer lock, prepare the
/// folder, sweep, then (without a shard) select, record, seal and append to the ledger.
pub fn run(manifest_path: &Path, options: &TrainOptions, on_event: &(dyn Fn(Event) + Sync)) -> Result<TrainOutcome> {
    let started = Instant::now();
    // First, so that an unusable TABCARD_KERNEL stops the command before anything is written.
    let environment = crate::numerics::current()?;
    let exp = open(manifest_path)?;
    crate::memory::return_freed_memory();
    let mut phases = vec![Phase::top(phase::SCAN, started.elapsed().as_secs_f64())];
    let building = Instant::now();
    let mut prepared = Prepared::new(exp)?;
    crate::memory::return_freed_memory();
    phases.push(Phase::top(phase::MATRICES, building.elapsed().as_secs_f64()));
    let (exp, plan, preprocessor) = (&prepared.exp, &prepared.plan, &prepared.exp.preprocessor);
    let m = &exp.manifest;
    // No more workers than runs to train (or cores): what the card and the timing record state.
    let planned_runs = options.shard.map(|s| s.size(plan.runs.len())).unwrap_or(plan.runs.len());
    let threads = crate::threads::workers(options.jobs, crate::threads::MAX_WORKERS)?;
    let options = &TrainOptions { jobs: crate::threads::workers(options.jobs, planned_runs)?, ..options.clone() };
    // Before anything is written: a plan that cannot fit in memory stops here, with the figures.
    crate::experiment::feasibility::require_calibration_rows(exp)?;
    crate::experiment::feasibility::require_known_features(exp)?;
    let estimate = crate::experiment::feasibility::estimate(exp, plan, preprocessor.width(), options.jobs);
    crate::experiment::feasibility::require(&estimate, crate::memory::available_bytes(), manifest_path)?;
    let layout = Layout::new(options.results_root.join(exp.short_id()));
    on_event(Event::Header(format!(
        "experiment {} ({}): {} runs planned, results in {}",
        crate::text::terminal_safe(&m.experiment.name),
        &exp.fingerprint[..16],
        options.shard.map(|s| s.size(plan.runs.len())).unwrap_or(plan.runs.len()),
        layout.root.display()
    )));
    for overridden in &exp.overridden_by_grid {
        on_event(Event::Header(format!("note: {}", crate::text::terminal_safe(overridden))));
    }
    // One writer per experiment (shards own disjoint runs and take none): a second `train` waits
    // here, then finds the runs stored.
    let _writer = match options.shard {
        None => Some(crate::store::lock::acquire(&layout.root, &|holder| on_event(Event::Waiting(holder.to_string())))?),
        Some(_) => None,
    };
    // The one writer clears what interrupted atomic writes left (shards never do: another shard
    // may be writing).
    if options.shard.is_none() {
        crate::store::remove_temporaries(&layout.root);
    }
    let found = prepare_folder(exp, &layout, plan, preprocessor)?;
    let sweep_inputs = SweepInputs {
        layout: &layout,
        plan,
        head: exp.head(),
        data: prepared.run_data(),
        validation_rows: &exp.splits.validation,
        preprocessor,
        selection_metric: &m.selection.metric,
        environment: &environment,
        jobs: options.jobs,
        threads,
        shard: options.shard,
    };
    let sweeping = Instant::now();
    let report = sweep::run(&sweep_inputs, on_event)?;
    phases.push(Phase::top(phase::SWEEP, sweeping.elapsed().as_secs_f64()));
    if let Some(shard) = options.shard {
        return Ok(shard_outcome(exp, plan, shard, &report, &layout, options.jobs));
    }
    // A sweep killed between its selection and the seal of its integrity list finishes both now.
    let nothing_new = report.trained.is_empty() && Folder::is_sealed(&layout);
    let mut replaced_note = String::new();
    let (selection, results_digest) = if nothing_new {
        // Nothing was trained: the stored results stand, once they match their integrity list
        // (checked when the folder was found sealed, or now).
        let sealed = match found {
            Folder::Sealed(sealed) => *sealed,
            _ => Sealed::open(&layout.root)?,
        };
        (sealed.selection()?, sealed.digest)
    } else {
        // Asked once: the timing record and the ledger line name the same commit.
        let git = crate::provenance::git_state(manifest_path);
        on_event(Event::Header(format!(
            "select and test: the selection rule over {} configurations, one evaluation of the selected run on {} test rows with {} bootstrap resamples, calibration, fairness, importance, sensitivity, the monitoring profile and the card",
            plan.configs.len(),
            exp.splits.test.len(),
            exp.manifest.selection.bootstrap
        )));
        let recorded = select_and_record(&mut prepared, &layout, &git, (options.jobs, threads), started, phases)?;
        let (exp, plan) = (&prepared.exp, &prepared.plan);
        let m = &exp.manifest;
        // One ledger line per completed selection: an invocation that trained nothing adds none.
        ledger::append(&options.results_root, &ledger_entry(exp, plan, &layout, &report, &recorded.0, &recorded.1, &git))?;
        replaced_note = compare_with_replaced(&m.experiment.replaces, &options.results_root, &layout)?;
        recorded
    };
    let (exp, plan) = (&prepared.exp, &prepared.plan);
    let m = &exp.manifest;
    let mut out = summary(exp, plan, &layout, &report, &selection, &results_digest, nothing_new, options.jobs);
    out.push_str(&replaced_note);
    let json = serde_json::json!({
        "experiment": m.experiment.name,
        "fingerprint": exp.fingerprint,
        "results": layout.root.display().to_string(),
        "card": layout.card().display().to_string(),
        "results_digest": results_digest,
        "nothing_new": nothing_new,
        "runs": runs_json(plan, &report),
        "selection": selection,
    });
    Ok(TrainOutcome { report: out, results: layout.root, failed_runs: report.failed.len(), json })
}
