//! Permutation importance of each raw feature for the deployed model on the test rows (Breiman
//! 2001, "Random Forests", Machine Learning 45, section 10; Fisher, Rudin & Dominici 2019, JMLR
//! 20(177)): all of a feature's network inputs (a one-hot group, a value and its missing flag)
//! permuted together across the test rows, and the selection metric's loss measured. Each of R
//! repeats draws one permutation per feature and one bootstrap resample of the test rows from
//! one seeded stream; the interval is the 2.5th to 97.5th percentile of the repeats' losses on
//! their resamples, so it covers both the permutation and the test rows' sampling. A feature
//! whose interval reaches 0 is not shown to matter.

use serde::{Deserialize, Serialize};

use super::estimate::Estimate;
use crate::data::prep::Matrix;
use crate::error::Result;
use crate::metrics::bootstrap::quantile_sorted;
use crate::metrics::registry::{direction, Direction};
use crate::rng::{Purpose, Stream};
use crate::selection::serving::Deployed;
use crate::training::head::ResampleScorer;
use crate::training::Labels;

/// One raw feature's importance.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct FeatureImportance {
    pub feature: String,
    /// Network inputs the feature is encoded into (permuted together).
    pub inputs: usize,
    /// How much worse the metric gets when the feature is permuted (positive: worse), mean over
    /// the repeats on all test rows, with the repeats' interval on their resamples.
    pub loss: Estimate,
    /// The interval lies above 0.
    pub shown_to_matter: bool,
}

/// The importance analysis of one experiment, most important first.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ImportanceReport {
    pub metric: String,
    /// The deployed model's metric on the test rows, unpermuted.
    pub test_value: f64,
    pub repeats: usize,
    /// How many test rows it was computed on, when a sample of them (`analysis/sample.rs`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sampled_rows: Option<usize>,
    pub features: Vec<FeatureImportance>,
}

/// The metric of `outputs` (k per row) on all rows and on the resample `sample`, each oriented so
/// that larger is better: from one prepared sample, with the bits of the metric on those rows;
/// no other metric is computed.
fn oriented(
    head: crate::training::Head,
    outputs: &[f64],
    y: &Labels,
    sample: &[usize],
    metric: &str,
    sign: f64,
) -> (Option<f64>, Option<f64>) {
    let scorer = ResampleScorer::new(head, outputs, y);
    let all: Vec<usize> = (0..y.len()).collect();
    let of = |idx: &[usize]| scorer.named_metrics(idx, &[metric]).get(metric).copied().flatten().map(|v| sign * v);
    (of(&all), of(sample))
}

/// Permutation importance of every raw feature of `test_x` (whose columns follow `features`,
/// each `(name, inputs)` in order) for `model` on the selection metric. Each repeat draws its
/// resample and every feature's permutation from the stream in order, then scores the features
/// in parallel on the current rayon pool, each thread on its own copy of the model: the same
/// values on any number of threads.
pub(crate) fn permutation_importance(
    model: &mut Deployed,
    test_x: &Matrix,
    test_y: &Labels,
    features: &[(String, usize)],
    (metric, task): (&str, crate::manifest::Task),
    repeats: usize,
    seed: u64,
) -> Result<Option<ImportanceReport>> {
    use rayon::prelude::*;
    let head = model.head();
    let sign = if direction(task, metric) == Some(Direction::Minimise) { -1.0 } else { 1.0 };
    let n = test_x.rows;
    let base = model.score(test_x)?;
    let mut stream = Stream::new(seed, Purpose::Permutation);
    let offsets: Vec<usize> = features.iter().scan(0, |at, (_, width)| Some(std::mem::replace(at, *at + width))).collect();
    let mut losses: Vec<Vec<f64>> = vec![Vec::with_capacity(repeats); features.len()];
    let mut resampled: Vec<Vec<f64>> = vec![Vec::with_capacity(repeats); features.len()];
    let mut base_all = None;
    let shared: &Deployed = model;
    let copies = crate::threads::PerThread::new();
    for _ in 0..repeats {
        let sample: Vec<usize> = (0..n).map(|_| stream.below(n as u64) as usize).collect();
        let (all, base_sample) = oriented(head, &base, test_y, &sample, metric, sign);
        let Some(all) = all else { return Ok(None) };
        base_all = Some(all);
        let orders: Vec<Vec<usize>> = features
            .iter()
            .map(|_| {
                let mut order: Vec<usize> = (0..n).collect();
                stream.shuffle(&mut order);
                order
            })
            .collect();
        // The features go to the pool's threads one at a time (their costs differ: a binary
        // feature's permutation changes about half the rows), each thread scoring on its own copy
        // of the model and of the rows, the permuted inputs put back after each feature.
        let scored: Vec<(Option<f64>, Option<f64>)> = features
            .par_iter()
            .zip(&offsets)
            .zip(&orders)
            .with_max_len(1)
            .map(|(((_, width), &first), order)| -> Result<(Option<f64>, Option<f64>)> {
                copies.with(
                    || (shared.clone().on_this_thread(), test_x.clone()),
                    |(model, permuted)| {
                        let cols = test_x.cols;
                        // Rows given their own values back (or equal ones: a binary or categorical
                        // feature's) keep their outputs and are not scored again.
                        let mut changed = Vec::with_capacity(n);
                        for (i, &from) in order.iter().enumerate() {
                            let (dst, src) = (i * cols + first, from * cols + first);
                            let (own, given) = (&test_x.data[dst..dst + width], &test_x.data[src..src + width]);
                            if crate::data::prep::bits_differ(own, given) {
                                changed.push(i);
                            }
                            permuted.data[dst..dst + width].copy_from_slice(given);
                        }
                        let outputs = model.score_changed(permuted, &changed, &base);
                        for i in 0..n {
                            let at = i * cols + first;
                            permuted.data[at..at + width].copy_from_slice(&test_x.data[at..at + width]);
                        }
                        Ok(oriented(head, &outputs?, test_y, &sample, metric, sign))
                    },
                )
            })
            .collect::<Result<_>>()?;
        for (f, (v, r)) in scored.into_iter().enumerate() {
            if let Some(v) = v {
                losses[f].push(all - v);
            }
            if let (Some(b), Some(r)) = (base_sample, r) {
                resampled[f].push(b - r);
            }
        }
    }
    let Some(base_all) = base_all else { return Ok(None) };
    let mut out: Vec<FeatureImportance> = features
        .iter()
        .zip(losses)
        .zip(resampled)
        .map(|(((feature, inputs), l), mut r)| {
            let value = l.iter().sum::<f64>() / l.len().max(1) as f64;
            r.sort_by(f64::total_cmp);
            let (lower, upper) = if r.is_empty() { (value, value) } else { (quantile_sorted(&r, 0.025), quantile_sorted(&r, 0.975)) };
            FeatureImportance {
                feature: feature.clone(),
                inputs: *inputs,
                loss: Estimate { value, lower, upper },
                shown_to_matter: lower > 0.0,
            }
        })
        .collect();
    // Most important first; ties keep the input order.
    out.sort_by(|a, b| b.loss.value.total_cmp(&a.loss.value));
    Ok(Some(ImportanceReport { metric: metric.into(), test_value: sign * base_all, repeats, sampled_rows: None, features: out }))
}

/// The analysis of a derived selection, as `train` stores it in `importance.json` and `verify`
/// re-derives it.
pub(crate) fn derive(
    prepared: &crate::experiment::prepared::Prepared,
    derived: &crate::selection::Derived,
    runs: &[crate::store::run::StoredRun],
    layout_version: u32,
) -> Result<Option<ImportanceReport>> {
    let exp = &prepared.exp;
    let m = &exp.manifest;
    let test = &exp.splits.test;
    let positions = super::sample::positions(test.len(), m.split.seed, layout_version);
    let rows = super::sample::rows(test, &positions);
    let test_x = derived.test_x.rows_at(&positions);
    let features: Vec<(String, usize)> = exp.preprocessor.inputs.iter().map(|e| (e.name().to_string(), e.width())).collect();
    let mut model = Deployed::load(&derived.selection, runs)?;
    let repeats = m.analysis.clone().unwrap_or_default().permutation_repeats;
    let pool = crate::threads::helper_pool(super::SCORING_BYTES_PER_THREAD, "score the permuted rows")?;
    let report = pool.install(|| {
        permutation_importance(
            &mut model,
            &test_x,
            &exp.labels(&rows),
            &features,
            (&derived.selection.metric, m.data.task),
            repeats,
            m.split.seed,
        )
    })?;
    Ok(report.map(|r| ImportanceReport { sampled_rows: (rows.len() < test.len()).then_some(rows.len()), ..r }))
}
