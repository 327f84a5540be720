//! Feasibility before work: an estimate of the memory a plan needs (the data shared by all
//! workers plus, per worker, the largest configuration's parameters, optimizer state and batch
//! buffers) against the memory this process may use (the kernel's available memory, an address
//! space limit such as `ulimit -v`, a cgroup limit), so that `check` reports it and `train`
//! refuses an infeasible plan before writing anything, never aborting mid-sweep.

use std::fmt::Write;

use crate::error::{Error, Result};
use crate::experiment::plan::{Plan, PlannedConfig};
use crate::experiment::Experiment;

/// Whether the validation split holds enough rows for `[calibration]`: the method's minimum for
/// a classifier's map, and for a regression interval at least the n with
/// ceil((n + 1) coverage) <= n. Checked by `check` and before `train` writes anything.
pub fn require_calibration_rows(exp: &Experiment) -> Result<()> {
    use crate::manifest::Task;
    let spec = exp.manifest.calibration.clone().unwrap_or_default();
    let rows = exp.splits.validation.len();
    let (key, minimum, what) = match exp.manifest.data.task {
        Task::Regression => {
            let coverage = spec.coverage();
            let minimum = crate::calibrate::conformal::minimum_rows(coverage);
            ("calibration.coverage", minimum, format!("a {coverage} conformal interval"))
        }
        _ => ("calibration.method", spec.method.minimum_rows(), format!("calibration method \"{}\"", spec.method.as_str())),
    };
    if rows >= minimum {
        return Ok(());
    }
    Err(crate::manifest::key_error(
        &exp.manifest_path,
        key,
        format!("{what} is fitted on the validation rows and needs at least {minimum}; the validation split has {rows}"),
        Some("raise split.validation, or choose a method that needs fewer rows".into()),
    ))
}

/// Whether every feature `[reasons]` gives a text for and `[analysis] sensitive` lists is one of
/// the model's features. Checked by `check` and before `train` writes anything.
pub fn require_known_features(exp: &Experiment) -> Result<()> {
    let m = &exp.manifest;
    let known: Vec<&str> = exp.preprocessor.inputs.iter().map(|e| e.name()).collect();
    let named = m
        .reasons
        .iter()
        .flatten()
        .map(|(f, _)| (format!("reasons.{f}"), f))
        .chain(m.analysis.iter().flat_map(|a| a.sensitive.iter().map(|f| ("analysis.sensitive".to_string(), f))));
    for (key, feature) in named {
        if !known.contains(&feature.as_str()) {
            return Err(crate::manifest::key_error(
                &exp.manifest_path,
                &key,
                format!("names `{}`, which is not one of the model's features", crate::text::terminal_safe(feature)),
                Some(format!("the features are: {}", known.join(", "))),
            ));
        }
    }
    Ok(())
}

/// Bytes per trainable parameter in one worker: the engine's weights and gradients (f32), the
/// optimizer's two moments (f64), the model's own copy, the copy handed over at start and at
/// the end, the best epoch's snapshot and the stored tensors.
const BYTES_PER_PARAMETER: u64 = 4 + 4 + 16 + 4 + 4 + 4 + 4;
/// Rows of every batch buffer at least (the engine evaluates in blocks of this many rows).
const EVAL_BLOCK: u64 = crate::nn::engine::EVAL_BLOCK as u64;

/// What training a plan needs, by the estimate of this module.
#[derive(Debug, Clone)]
pub struct MemoryEstimate {
    /// The configuration that needs the most, its parameter count and bytes per worker.
    pub largest: String,
    pub parameters: u64,
    pub per_worker: u64,
    /// The encoded matrices and the per-row bookkeeping, shared by every worker.
    pub shared: u64,
    pub workers: usize,
    pub total: u64,
    /// The feature whose encoding takes the most input columns, with that count (at most), and
    /// the encoded width of every feature together (at most).
    pub widest_feature: Option<(String, usize)>,
    pub width_bound: usize,
}

/// Parameters of a configuration for `inputs` input columns and `outputs` outputs.
pub fn parameter_count(config: &PlannedConfig, inputs: usize, outputs: usize) -> u64 {
    let model = &config.config.model;
    let hidden: &[usize] = if config.baseline { &[] } else { &model.hidden };
    let mut width = inputs as u64;
    let mut count = 0u64;
    for &w in hidden {
        let w = w as u64;
        count = count.saturating_add(width.saturating_mul(w).saturating_add(w));
        if model.batch_norm {
            count = count.saturating_add(2 * w);
        }
        width = w;
    }
    count.saturating_add(width.saturating_mul(outputs as u64).saturating_add(outputs as u64))
}

/// Bytes one worker needs to train `config`.
fn worker_bytes(config: &PlannedConfig, inputs: usize, outputs: usize) -> u64 {
    let rows = (config.config.training.batch_size as u64).max(EVAL_BLOCK);
    let hidden: &[usize] = if config.baseline { &[] } else { &config.config.model.hidden };
    let widest = hidden.iter().copied().chain([inputs, outputs]).max().unwrap_or(1) as u64;
    // Per hidden unit and row: pre-activation, output, activation copy, dropout mask, batch-norm
    // output; two gradient buffers and the dropout draws at the widest layer; the input batch.
    let activations = hidden.iter().map(|&w| 5 * w as u64).sum::<u64>().saturating_add(3 * widest).saturating_add(inputs as u64);
    let buffers = rows.saturating_mul(activations).saturating_mul(4);
    parameter_count(config, inputs, outputs).saturating_mul(BYTES_PER_PARAMETER).saturating_add(buffers)
}

/// Input columns after encoding, at most: one per numeric feature plus a missing-value
/// indicator, and per categorical feature one per level, the unseen bucket and the indicator.
pub fn input_width_bound(exp: &Experiment) -> usize {
    feature_widths(exp).map(|(_, w)| w).sum()
}

/// Each feature's encoded input columns, at most (see [`input_width_bound`]).
fn feature_widths(exp: &Experiment) -> impl Iterator<Item = (&str, usize)> {
    let distinct: std::collections::HashMap<&str, usize> = exp.summary.columns.iter().map(|c| (c.name.as_str(), c.distinct)).collect();
    exp.roles.features.iter().map(move |f| match distinct.get(f.name.as_str()) {
        Some(d) if f.categorical => (f.name.as_str(), d + 2),
        _ => (f.name.as_str(), 2),
    })
}

/// The estimate for `plan` with `inputs` encoded input columns, on `jobs` workers.
pub fn estimate(exp: &Experiment, plan: &Plan, inputs: usize, jobs: usize) -> MemoryEstimate {
    let outputs = exp.head().outputs();
    let largest = plan.configs.iter().max_by_key(|c| worker_bytes(c, inputs, outputs));
    let per_worker = largest.map_or(0, |c| worker_bytes(c, inputs, outputs));
    // The f32 matrices of every row, plus what the first pass keeps per row (target, split lists,
    // digest and its set: about 64 bytes) and one decoded column while it reads.
    let rows = exp.rows as u64;
    let shared = rows.saturating_mul(inputs as u64).saturating_mul(4).saturating_add(rows.saturating_mul(64 + 8));
    let workers = jobs.clamp(1, plan.runs.len().max(1));
    let total = shared.saturating_add(per_worker.saturating_mul(workers as u64));
    let label = match largest {
        None => "(none planned)".to_string(),
        Some(c) if c.baseline => "linear baseline".to_string(),
        Some(c) => format!("model.hidden = {:?}", c.config.model.hidden),
    };
    let parameters = largest.map_or(0, |c| parameter_count(c, inputs, outputs));
    let widest_feature = feature_widths(exp).max_by_key(|(_, w)| *w).map(|(n, w)| (n.to_string(), w));
    MemoryEstimate { parameters, largest: label, per_worker, shared, workers, total, widest_feature, width_bound: input_width_bound(exp) }
}

fn mib(bytes: u64) -> String {
    format!("{:.0} MiB", bytes as f64 / (1024.0 * 1024.0))
}

/// One line for `check` and `train`: the figures of the estimate and what is available.
pub fn describe(e: &MemoryEstimate, available: Option<u64>) -> String {
    let mut out = String::new();
    let _ = write!(
        out,
        "largest configuration {} with {} parameters: about {} per worker x {} worker(s) + {} of data = {}",
        e.largest,
        e.parameters,
        mib(e.per_worker),
        e.workers,
        mib(e.shared),
        mib(e.total)
    );
    if let Some(a) = available {
        let _ = write!(out, " (available: {})", mib(a));
    }
    out
}

/// An error when the estimate exceeds what is available, naming the figures and the key.
pub fn require(e: &MemoryEstimate, available: Option<u64>, what: &std::path::Path) -> Result<()> {
    match available {
        Some(a) if e.total > a => Err(Error::Usage(format!(
            "{}: the plan needs an estimated {} of memory, more than the {} available: {}; {}",
            what.display(),
            mib(e.total),
            mib(a),
            describe(e, None),
            advice(e)
        ))),
        _ => Ok(()),
    }
}

/// What to change: the one feature whose encoding takes most of the input width when there is
/// one (over half of it), else the network's width or the workers.
fn advice(e: &MemoryEstimate) -> String {
    match &e.widest_feature {
        Some((name, width)) if 2 * width > e.width_bound => format!(
            "column `{}` is one-hot encoded into up to {width} of the {} input columns ({:.0}%): list it in `data.drop`, or group its \
             levels into fewer before training",
            crate::text::terminal_safe(name),
            e.width_bound,
            100.0 * *width as f64 / e.width_bound.max(1) as f64
        ),
        _ => "reduce `model.hidden` (or its grid values) or --jobs".into(),
    }
}
