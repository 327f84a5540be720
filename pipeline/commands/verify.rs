//! `tabcard verify <results folder | manifest>`: rerun an experiment from what its results folder
//! records and compare every weight tensor (SHA-256), every history row and every metric with the
//! stored ones. Every stored file is checked against the folder's integrity list first (a tampered
//! file is named and nothing is retrained), then data and manifest; the selection and test
//! metrics are re-derived from the stored runs, the results digest is compared with the ledger's,
//! and the environment with the one recorded, because that is the first question an auditor asks.

use std::collections::BTreeSet;
use std::fmt::Write;
use std::path::{Path, PathBuf};

use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::experiment::plan::Plan;
use crate::experiment::prepared::Prepared;
use crate::experiment::{open, open_with_data};
use crate::fingerprint::file_sha256;
use crate::manifest::LoadedManifest;
use crate::numerics::NumericsFingerprint;
use crate::results::Sealed;
use crate::selection::Selection;
use crate::store::run::StoredRun;
use crate::store::weights::tensor_digests;
use crate::sweep::{in_pool, train_run, Event, RunReport, SweepInputs, TrainedRun};

pub struct VerifyOptions {
    pub all: bool,
    pub jobs: usize,
    /// Use this data file instead of the recorded path (it must still match the fingerprints).
    pub data: Option<PathBuf>,
    pub results_root: PathBuf,
}

pub struct VerifyOutcome {
    pub report: String,
    pub identical: bool,
    pub json: serde_json::Value,
}

/// The results folder a verify target names: the folder itself, or a manifest's folder under the
/// results root.
fn results_folder(target: &Path, results_root: &Path) -> Result<PathBuf> {
    if crate::manifest::is_manifest_path(target) {
        let exp = open(target)?;
        let folder = results_root.join(exp.short_id());
        if !folder.exists() {
            return Err(Error::store(&folder, format!("no results for experiment {} (train it first)", exp.fingerprint)));
        }
        return Ok(folder);
    }
    Ok(target.to_path_buf())
}

/// The first difference between a retrained run and its stored record, if any.
fn compare_run(stored: &StoredRun, fresh: &TrainedRun) -> Result<Vec<String>> {
    let mut diffs = Vec::new();
    let r = &stored.record;
    if r.outcome != fresh.record.outcome {
        diffs.push(format!("outcome: stored {}, rerun {}", r.outcome.describe(), fresh.record.outcome.describe()));
    }
    if !r.tensor_sha256.is_empty() {
        let on_disk = tensor_digests(&stored.tensors()?);
        if let Some(name) = r.tensor_sha256.keys().find(|k| on_disk.get(*k) != r.tensor_sha256.get(*k)) {
            diffs.push(format!(
                "stored weights file: tensor `{name}` does not match its recorded SHA-256 (weights.safetensors was altered)"
            ));
        }
    }
    let names: BTreeSet<&String> = r.tensor_sha256.keys().chain(fresh.record.tensor_sha256.keys()).collect();
    if let Some(name) = names.into_iter().find(|k| r.tensor_sha256.get(*k) != fresh.record.tensor_sha256.get(*k)) {
        diffs.push(format!(
            "first differing tensor `{name}`: recorded SHA-256 {}, rerun {}",
            r.tensor_sha256.get(name).map(String::as_str).unwrap_or("(absent)"),
            fresh.record.tensor_sha256.get(name).map(String::as_str).unwrap_or("(absent)")
        ));
    }
    let history = stored.history()?;
    let first = history
        .iter()
        .zip(&fresh.history)
        .position(|(a, b)| a != b)
        .or_else(|| (history.len() != fresh.history.len()).then(|| history.len().min(fresh.history.len())));
    if let Some(i) = first {
        diffs.push(format!("history differs from epoch {} on ({} stored epochs, {} rerun)", i + 1, history.len(), fresh.history.len()));
    }
    for (split, a, b) in [("training", &r.train, &fresh.record.train), ("validation", &r.validation, &fresh.record.validation)] {
        if let Some((k, v)) = a.iter().find(|(k, v)| b.get(*k) != Some(v)) {
            diffs.push(format!("{split} {k}: stored {v:?}, rerun {:?}", b.get(k).copied().flatten()));
        }
    }
    Ok(diffs)
}

/// Where the recording and the rerun environment differ, each line marked by whether it bears on
/// the promise (tool and kernel versions) or is for the record only (CPU, dispatch level, libc).
fn environment_differences(recorded: &NumericsFingerprint, now: &NumericsFingerprint) -> Vec<String> {
    let mut out = Vec::new();
    let mut field = |name: &str, a: &str, b: &str, decides: bool| {
        if a != b {
            let role = if decides { "changes what is promised" } else { "for the record: changes no bit" };
            out.push(format!("{name}: recorded {a}, now {b} ({role})"));
        }
    };
    field("tool version", &recorded.tool_version, &now.tool_version, true);
    field("kernel version", &recorded.kernel_version, &now.kernel_version, true);
    field("tool source commit", &recorded.tool_commit, &now.tool_commit, false);
    field("candle version", &recorded.candle_version, &now.candle_version, false);
    field("dispatch level", &recorded.kernel_level, &now.kernel_level, false);
    field("target", &format!("{} {}", recorded.target_arch, recorded.target_os), &format!("{} {}", now.target_arch, now.target_os), false);
    field("CPU features", &recorded.cpu_features.join(" "), &now.cpu_features.join(" "), false);
    field("C library", &recorded.libc, &now.libc, false);
    out
}

/// Where the recorded manifest (a path relative to its project root) is now: under the nearest
/// folder above the results folder that holds it (results usually live inside the project), else
/// relative to the current folder.
fn locate_manifest(recorded: &str, results_folder: &Path) -> PathBuf {
    let absolute = results_folder.canonicalize().unwrap_or_else(|_| results_folder.to_path_buf());
    let found = absolute.ancestors().map(|a| a.join(recorded)).find(|p| p.is_file());
    found.unwrap_or_else(|| PathBuf::from(recorded))
}

pub fn run(target: &Path, options: &VerifyOptions, on_event: &(dyn Fn(Event) + Sync)) -> Result<VerifyOutcome> {
    let sealed = Sealed::open(&results_folder(target, &options.results_root)?)?;
    let (layout, digest, record) = (&sealed.layout, sealed.digest.clone(), &sealed.record);
    let manifest = sealed.manifest()?;
    let manifest_path = locate_manifest(&record.manifest_path, &layout.root);
    let data_path = match &options.data {
        Some(p) => p.clone(),
        None => manifest_path.parent().unwrap_or(Path::new(".")).join(&manifest.data.path),
    };
    let changed = |file_hash: &str| {
        Error::data(
            &data_path,
            None,
            format!("has changed since training: its SHA-256 is now {file_hash}, the results record {}", record.data.file_sha256),
        )
    };
    // The file is hashed once, by the first pass; a file that fails the first pass is hashed
    // again only to say whether it is the recorded one.
    let exp = match open_with_data(LoadedManifest { path: manifest_path, manifest, overridden_by_grid: Vec::new() }, data_path.clone()) {
        Ok(exp) => exp,
        Err(e) => match file_sha256(&data_path) {
            Ok(hash) if hash != record.data.file_sha256 => return Err(changed(&hash)),
            _ => return Err(e),
        },
    };
    if exp.data.file_sha256 != record.data.file_sha256 {
        return Err(changed(&exp.data.file_sha256));
    }
    if exp.data.content_sha256 != record.data.content_sha256 {
        return Err(Error::data(
            &data_path,
            None,
            format!("content hash {} differs from the recorded {}", exp.data.content_sha256, record.data.content_sha256),
        ));
    }
    let prepared = Prepared::with_fingerprint(exp, &record.fingerprint)?;
    let stored_plan: Plan = sealed.plan()?;
    if stored_plan != prepared.plan {
        return Err(Error::store(layout.plan(), "differs from the plan the manifest expands to"));
    }
    let stored_prep = sealed.preprocessor()?;
    if stored_prep != prepared.exp.preprocessor {
        return Err(Error::store(layout.preprocessor(), "differs from the preprocessor refitted on the training rows"));
    }
    let selection: Selection = sealed.selection()?;
    let specs: Vec<_> = prepared.plan.runs.iter().filter(|r| options.all || r.config_id == selection.selected_config).collect();

    let now = crate::numerics::current()?;
    let jobs = crate::threads::workers(options.jobs, specs.len())?;
    let inputs = SweepInputs {
        layout,
        plan: &prepared.plan,
        head: prepared.exp.head(),
        data: prepared.run_data(),
        validation_rows: &prepared.exp.splits.validation,
        preprocessor: &prepared.exp.preprocessor,
        selection_metric: &prepared.exp.manifest.selection.metric,
        environment: &now,
        jobs,
        shard: None,
    };
    on_event(Event::Header(format!("verify {}: retraining {} of {} runs", layout.root.display(), specs.len(), prepared.plan.runs.len())));
    on_event(Event::Planned {
        pending: specs.len(),
        reused: 0,
        metric: prepared.exp.manifest.selection.metric.clone(),
        direction: crate::metrics::registry::Direction::of_higher_is_better(selection.higher_is_better),
    });
    let verdicts: Vec<(String, u64, Result<Vec<String>>)> = in_pool(jobs, || {
        specs
            .par_iter()
            .map(|spec| {
                let verdict = (|| {
                    let stored = sealed.run(&spec.id)?;
                    let fresh = train_run(&inputs, spec)?;
                    let differences = compare_run(&stored, &fresh)?;
                    let mut report = RunReport::new(&inputs, spec, &fresh.record, fresh.seconds);
                    report.verdict =
                        Some(if differences.is_empty() { "identical".into() } else { format!("DIFFERS ({} items)", differences.len()) });
                    on_event(Event::Finished(report));
                    Ok(differences)
                })();
                (spec.id.clone(), spec.seed, verdict)
            })
            .collect()
    })?;

    let mut out = String::new();
    let mut identical = true;
    let _ = writeln!(out, "verifying {} ({})", layout.root.display(), record.fingerprint);
    let _ = writeln!(
        out,
        "data      {} matches: file SHA-256 {}, content SHA-256 {}",
        data_path.display(),
        record.data.file_sha256,
        record.data.content_sha256
    );
    let _ = writeln!(out, "manifest  matches its recorded SHA-256 {}", record.manifest_sha256);
    let recorded_env: Option<NumericsFingerprint> = specs.first().and_then(|s| sealed.environment(&s.id));
    match recorded_env {
        Some(recorded) => {
            let promised = recorded.promises_same_bits_as(&now);
            let differences = environment_differences(&recorded, &now);
            let _ = if promised {
                writeln!(
                    out,
                    "numerics  tabcard {} with kernels {}, as recorded: identical bits are promised on any CPU",
                    now.tool_version, now.kernel_version
                )
            } else {
                writeln!(out, "numerics  DIFFER from the recorded ones: identical bits are promised only for the same tabcard version and kernel version")
            };
            for line in differences {
                let _ = writeln!(out, "  {line}");
            }
        }
        None => {
            let _ = writeln!(out, "numerics  no recorded environment to compare");
        }
    }
    let _ = writeln!(out, "\nruns ({}):", if options.all { "all" } else { "selected configuration" });
    for (id, seed, verdict) in &verdicts {
        match verdict {
            Ok(d) if d.is_empty() => {
                let _ = writeln!(out, "  {id} seed {seed}: identical (weights, history, metrics)");
            }
            Ok(d) => {
                identical = false;
                let _ = writeln!(out, "  {id} seed {seed}: DIFFERS");
                for line in d {
                    let _ = writeln!(out, "    {line}");
                }
            }
            Err(e) => {
                identical = false;
                let _ = writeln!(out, "  {id} seed {seed}: CANNOT VERIFY: {e}");
            }
        }
    }
    // The selection and its one test evaluation, re-derived from the stored runs.
    let derived = sealed.runs(&prepared.plan).and_then(|runs| crate::selection::derive(&prepared, &runs));
    let as_value = |s: &Selection| serde_json::to_value(s).map_err(|e| Error::Internal(format!("serialising the selection: {e}")));
    match derived {
        Ok(derived) if as_value(&derived)? == as_value(&selection)? => {
            let _ = writeln!(out, "\nselection re-derived from the stored runs: matches selection.json (selected run, validation summaries, test metrics and intervals)");
        }
        Ok(_) => {
            identical = false;
            let _ = writeln!(
                out,
                "\nselection DIFFERS: selection.json does not match the selection and test metrics re-derived from the stored runs"
            );
        }
        Err(e) => {
            identical = false;
            let _ = writeln!(out, "\nselection CANNOT be re-derived from the stored runs: {e}");
        }
    }
    match crate::card::render(layout, None, &digest) {
        Ok((card, _)) => {
            let stored_card = sealed.card_text()?;
            let _ = if card == stored_card {
                writeln!(out, "card      matches the card rendered from the stored evidence")
            } else {
                writeln!(out, "card      differs from the default rendering of the evidence (expected only when it was rendered with `card --templates` or timing.json changed)")
            };
        }
        Err(e) => {
            identical = false;
            let _ = writeln!(out, "card      CANNOT be re-rendered from the stored evidence: {e}");
        }
    }
    let root = layout.root.parent().unwrap_or(Path::new("."));
    let ledgered = crate::store::ledger::read(root)?
        .into_iter()
        .rev()
        .find(|e| e.fingerprint == record.fingerprint && e.results_digest.is_some())
        .and_then(|e| e.results_digest);
    match ledgered {
        Some(d) if d == digest => {
            let _ = writeln!(out, "digest    {digest}: every stored file matches integrity.sha256, and the ledger records this digest");
        }
        Some(d) => {
            identical = false;
            let _ = writeln!(out, "digest    {digest} DIFFERS from the ledger's {d}: integrity.sha256 was rewritten after training");
        }
        None => {
            let _ = writeln!(
                out,
                "digest    {digest}: every stored file matches integrity.sha256 (no ledger line records a digest for this experiment)"
            );
        }
    }
    let _ = writeln!(out, "\nverdict   {}", if identical { "verified: every run reproduced bit for bit" } else { "NOT verified" });
    // The verdict stands whether or not it can be recorded (a read-only store): say both.
    let recorded = crate::store::ledger::append_verification(
        root,
        &crate::store::ledger::VerificationEntry {
            time: crate::provenance::now_rfc3339(),
            fingerprint: record.fingerprint.clone(),
            results: crate::store::folder_name(&layout.root),
            runs_checked: verdicts.len(),
            identical,
        },
    );
    if let Err(e) = &recorded {
        let _ = writeln!(out, "warning   this verification could not be recorded in {}: {e}", crate::store::ledger::VERIFICATIONS);
    }
    let runs: Vec<serde_json::Value> = verdicts
        .iter()
        .map(|(id, seed, v)| match v {
            Ok(d) => serde_json::json!({ "run": id, "seed": seed, "identical": d.is_empty(), "differences": d }),
            Err(e) => serde_json::json!({ "run": id, "seed": seed, "identical": false, "error": e.to_string() }),
        })
        .collect();
    let json = serde_json::json!({
        "results": layout.root.display().to_string(),
        "fingerprint": record.fingerprint,
        "identical": identical,
        "results_digest": digest,
        "runs": runs,
        "recorded": recorded.is_ok(),
    });
    Ok(VerifyOutcome { report: out, identical, json })
}
