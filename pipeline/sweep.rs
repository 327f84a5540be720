//! Runs a plan's pending runs on a rayon pool of `jobs` workers, each run single-threaded inside.
//! Runs whose folder is already complete are reused, never retrained; a failing or diverging run
//! is recorded with its reason and the others go on. Workers share the matrices read-only.

use rayon::prelude::*;
use std::time::Instant;

use crate::data::prep::Preprocessor;
use crate::error::{Error, Result};
use crate::numerics::NumericsFingerprint;
use crate::plan::{Plan, RunSpec};
use crate::store::run::{read_run, sweep_stale_partials, write_run, RunArtifacts, RunRecord};
use crate::store::weights::{tensor_digests, weights_digest};
use crate::store::Layout;
use crate::train::{train, Head, Outcome, RunData};

/// Progress notifications, for a display the caller owns.
#[derive(Debug, Clone)]
pub enum Event {
    Planned { pending: usize, reused: usize },
    Finished { run_id: String, outcome: Outcome },
}

pub struct SweepInputs<'a> {
    pub layout: &'a Layout,
    pub plan: &'a Plan,
    pub head: Head,
    pub data: RunData<'a>,
    pub validation_rows: &'a [usize],
    pub preprocessor: &'a Preprocessor,
    pub selection_metric: &'a str,
    pub environment: &'a NumericsFingerprint,
    pub jobs: usize,
}

#[derive(Debug, Default)]
pub struct SweepReport {
    pub trained: Vec<String>,
    pub reused: Vec<String>,
    /// (run id, reason) of runs that diverged or failed, this time or before.
    pub failed: Vec<(String, String)>,
}

fn run_one(inputs: &SweepInputs<'_>, spec: &RunSpec) -> Result<Outcome> {
    let planned = inputs.plan.config(&spec.config_id).ok_or_else(|| Error::Engine(format!("run {} names no configuration", spec.id)))?;
    let started = Instant::now();
    let result = train(inputs.head, &planned.config, spec.seed, &inputs.data, inputs.selection_metric);
    let seconds = started.elapsed().as_secs_f64();
    let (record_fields, tensors, history, outputs) = match result {
        Ok(r) => ((r.outcome, r.best_epoch, r.history.len(), r.stopped_early, r.parameter_count, r.target_scaling, r.train_metrics, r.validation_metrics), r.tensors, r.history, r.validation_outputs),
        Err(e) => ((Outcome::Failed { detail: e.to_string() }, 0, 0, false, 0, None, Default::default(), Default::default()), Vec::new(), Vec::new(), Vec::new()),
    };
    let (outcome, best_epoch, epochs_run, stopped_early, parameter_count, target_scaling, train_metrics, validation_metrics) = record_fields;
    let record = RunRecord {
        run_id: spec.id.clone(),
        config_id: spec.config_id.clone(),
        seed: spec.seed,
        baseline: planned.baseline,
        outcome: outcome.clone(),
        best_epoch,
        epochs_run,
        stopped_early,
        parameter_count,
        head: inputs.head,
        target_scaling,
        train: train_metrics,
        validation: validation_metrics,
        weights_sha256: if tensors.is_empty() { String::new() } else { weights_digest(&tensors) },
        tensor_sha256: tensor_digests(&tensors),
    };
    write_run(inputs.layout, &RunArtifacts {
        record,
        config: &planned.config,
        preprocessor: inputs.preprocessor,
        tensors: &tensors,
        history: &history,
        validation_rows: inputs.validation_rows,
        validation_outputs: &outputs,
        environment: inputs.environment,
        seconds,
    })?;
    Ok(outcome)
}

/// Trains every run of the plan that has no complete folder yet.
pub fn run(inputs: &SweepInputs<'_>, on_event: &(dyn Fn(Event) + Sync)) -> Result<SweepReport> {
    crate::store::create_dir(&inputs.layout.runs())?;
    sweep_stale_partials(inputs.layout);
    let mut report = SweepReport::default();
    let mut pending = Vec::new();
    for spec in &inputs.plan.runs {
        match read_run(inputs.layout, &spec.id)? {
            Some(stored) => {
                if !stored.record.outcome.is_completed() {
                    report.failed.push((spec.id.clone(), stored.record.outcome.describe()));
                }
                report.reused.push(spec.id.clone());
            }
            None => pending.push(spec),
        }
    }
    on_event(Event::Planned { pending: pending.len(), reused: report.reused.len() });
    if pending.is_empty() {
        return Ok(report);
    }
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(inputs.jobs.max(1))
        .build()
        .map_err(|e| Error::Engine(format!("cannot start {} workers: {e}", inputs.jobs)))?;
    let results: Vec<(String, Result<Outcome>)> = pool.install(|| {
        pending
            .par_iter()
            .map(|spec| {
                let r = run_one(inputs, spec);
                if let Ok(outcome) = &r {
                    on_event(Event::Finished { run_id: spec.id.clone(), outcome: outcome.clone() });
                }
                (spec.id.clone(), r)
            })
            .collect()
    });
    for (id, r) in results {
        let outcome = r?;
        if !outcome.is_completed() {
            report.failed.push((id.clone(), outcome.describe()));
        }
        report.trained.push(id);
    }
    Ok(report)
}
