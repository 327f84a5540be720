//! Runs a plan's pending runs on `jobs` workers of a pool of `threads` threads; each run's products
//! are split across the threads no run occupies (`nn/spread.rs`), with the same bits.
//! Runs whose folder is already complete are reused, never retrained; a failing or diverging run
//! is recorded with its reason and the others go on. Workers share the matrices read-only.

pub mod shard;
pub mod slurm;

use std::time::Instant;

use crate::data::prep::Preprocessor;
use crate::error::{Error, Result};
use crate::experiment::plan::{Plan, RunSpec};
use crate::numerics::NumericsFingerprint;
use crate::store::run::{read_run, sweep_stale_partials, write_run, RunArtifacts, RunRecord};
use crate::store::weights::{tensor_digests, weights_digest};
use crate::store::Layout;
use crate::sweep::shard::Shard;
use crate::training::{train, Head, Outcome, RunData};

/// Progress notifications, for a display the caller owns (`main.rs`).
#[derive(Debug, Clone)]
pub enum Event {
    /// What the command is about to do, shown at once.
    Header(String),
    /// Another process is writing this experiment; this one waits for it.
    Waiting(String),
    /// The runs to train (`pending`) and those already stored (`reused`), and the metric whose
    /// best value so far the display may show.
    Planned {
        pending: usize,
        reused: usize,
        metric: String,
        direction: crate::metrics::registry::Direction,
        /// Runs retrained to be compared with stored ones (`verify`), not trained to be kept.
        retraining: bool,
    },
    Finished(RunReport),
}

/// One finished run, for progress lines.
#[derive(Debug, Clone)]
pub struct RunReport {
    pub run_id: String,
    /// The configuration's label (`dropout=0.2 hidden=[16]`, `linear baseline`).
    pub label: String,
    pub seed: u64,
    pub outcome: Outcome,
    /// The run's validation value of the selection metric.
    pub metric: Option<f64>,
    pub seconds: f64,
    /// For `verify`: what the comparison with the stored run found.
    pub verdict: Option<String>,
}

impl RunReport {
    pub fn new(inputs: &SweepInputs<'_>, spec: &RunSpec, record: &RunRecord, seconds: f64) -> Self {
        let label = inputs
            .plan
            .config(&spec.config_id)
            .map(|c| crate::experiment::plan::config_label(&c.overrides, c.baseline))
            .unwrap_or_default();
        RunReport {
            run_id: spec.id.clone(),
            label,
            seed: spec.seed,
            outcome: record.outcome.clone(),
            metric: record.validation.get(inputs.selection_metric).copied().flatten(),
            seconds,
            verdict: None,
        }
    }
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
    /// Runs trained at once.
    pub jobs: usize,
    /// Threads of the pool the runs share (at least `jobs`): threads no run occupies compute
    /// pieces of the runs in flight. Speed only.
    pub threads: usize,
    /// Only this part of the plan's run list (the whole plan when `None`).
    pub shard: Option<Shard>,
}

#[derive(Debug, Default)]
pub struct SweepReport {
    pub trained: Vec<String>,
    /// Runs not trained: found complete in this folder, or copied from another experiment's.
    pub reused: Vec<String>,
    /// The reused runs copied from another experiment folder, and from where.
    pub copied: Vec<crate::store::run::Adopted>,
    /// (run id, reason) of runs that diverged or failed, this time or before.
    pub failed: Vec<(String, String)>,
}

fn planned_config<'a>(inputs: &'a SweepInputs<'_>, spec: &RunSpec) -> Result<&'a crate::experiment::plan::PlannedConfig> {
    inputs.plan.config(&spec.config_id).ok_or_else(|| Error::Internal(format!("run {} names no configuration of its plan", spec.id)))
}

/// What training one run produced, before it is stored.
pub struct TrainedRun {
    pub record: RunRecord,
    pub tensors: Vec<crate::nn::mlp::NamedTensor>,
    pub history: Vec<crate::training::EpochRecord>,
    pub validation_outputs: Vec<f64>,
    pub seconds: f64,
    /// Threads that computed pieces of the run (speed only).
    pub threads_taken: usize,
}

/// Trains one run of the plan and builds its record (an engine error becomes a failed outcome).
pub fn train_run(inputs: &SweepInputs<'_>, spec: &RunSpec) -> Result<TrainedRun> {
    let planned = planned_config(inputs, spec)?;
    let started = Instant::now();
    let result = train(inputs.head, &planned.config, spec.seed, &inputs.data, inputs.selection_metric);
    let seconds = started.elapsed().as_secs_f64();
    let mut record = RunRecord {
        run_id: spec.id.clone(),
        config_id: spec.config_id.clone(),
        seed: spec.seed,
        baseline: planned.baseline,
        outcome: Outcome::Completed,
        best_epoch: 0,
        epochs_run: 0,
        stopped_early: false,
        parameter_count: 0,
        head: inputs.head,
        target_scaling: None,
        train: Default::default(),
        validation: Default::default(),
        weights_sha256: String::new(),
        tensor_sha256: Default::default(),
    };
    let r = match result {
        Ok(r) => r,
        Err(e) => {
            record.outcome = Outcome::Failed { detail: e.to_string() };
            return Ok(TrainedRun {
                record,
                tensors: Vec::new(),
                history: Vec::new(),
                validation_outputs: Vec::new(),
                seconds,
                threads_taken: 1,
            });
        }
    };
    record.outcome = r.outcome;
    record.best_epoch = r.best_epoch;
    record.epochs_run = r.history.len();
    record.stopped_early = r.stopped_early;
    record.parameter_count = r.parameter_count;
    record.target_scaling = r.target_scaling;
    record.train = r.train_metrics;
    record.validation = r.validation_metrics;
    if !r.tensors.is_empty() {
        record.weights_sha256 = weights_digest(&r.tensors);
        record.tensor_sha256 = tensor_digests(&r.tensors);
    }
    Ok(TrainedRun {
        record,
        tensors: r.tensors,
        history: r.history,
        validation_outputs: r.validation_outputs,
        seconds,
        threads_taken: r.threads_taken,
    })
}

fn run_one(inputs: &SweepInputs<'_>, spec: &RunSpec) -> Result<RunReport> {
    let planned = planned_config(inputs, spec)?;
    let t = train_run(inputs, spec)?;
    let report = RunReport::new(inputs, spec, &t.record, t.seconds);
    write_run(
        inputs.layout,
        &RunArtifacts {
            record: t.record,
            config: &planned.config,
            preprocessor: inputs.preprocessor,
            tensors: &t.tensors,
            history: &t.history,
            validation_rows: inputs.validation_rows,
            validation_outputs: &t.validation_outputs,
            environment: inputs.environment,
            seconds: t.seconds,
            threads_taken: t.threads_taken,
        },
    )?;
    Ok(report)
}

/// Trains every run of the plan (or of its shard) that has no complete folder yet.
pub fn run(inputs: &SweepInputs<'_>, on_event: &(dyn Fn(Event) + Sync)) -> Result<SweepReport> {
    crate::store::create_dir(&inputs.layout.runs())?;
    sweep_stale_partials(inputs.layout);
    let mut report = SweepReport::default();
    let mut pending = Vec::new();
    let in_shard = |i: usize| inputs.shard.is_none_or(|s| s.contains(i));
    for (_, spec) in inputs.plan.runs.iter().enumerate().filter(|(i, _)| in_shard(*i)) {
        match read_run(inputs.layout, &spec.id)? {
            Some(stored) => {
                if !stored.record.outcome.is_completed() {
                    report.failed.push((spec.id.clone(), stored.record.outcome.describe()));
                }
                report.reused.push(spec.id.clone());
            }
            None => match crate::store::run::adopt(inputs.layout, &spec.id, &planned_config(inputs, spec)?.config, inputs.preprocessor)? {
                Some(adopted) => {
                    report.reused.push(spec.id.clone());
                    report.copied.push(adopted);
                }
                None => pending.push(spec),
            },
        }
    }
    let direction = crate::metrics::registry::direction(inputs.head.task, inputs.selection_metric)
        .unwrap_or(crate::metrics::registry::Direction::Minimise);
    on_event(Event::Planned {
        pending: pending.len(),
        reused: report.reused.len(),
        metric: inputs.selection_metric.to_string(),
        direction,
        retraining: false,
    });
    if pending.is_empty() {
        return Ok(report);
    }
    let results: Vec<(String, Result<RunReport>)> =
        crate::threads::each_on_workers(inputs.threads, crate::threads::runs_in_flight(inputs.jobs), &pending, |spec| {
            let r = run_one(inputs, spec);
            if let Ok(run) = &r {
                on_event(Event::Finished(run.clone()));
            }
            (spec.id.clone(), r)
        })?;
    for (id, r) in results {
        let outcome = r?.outcome;
        if !outcome.is_completed() {
            report.failed.push((id.clone(), outcome.describe()));
        }
        report.trained.push(id);
    }
    Ok(report)
}
