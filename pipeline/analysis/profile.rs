//! `profile.json` (layout 7): the reference population monitoring compares new batches with, stored
//! as evidence so `monitor` needs the results folder only. Each raw feature is binned on the
//! training split, the deployed model's score on the test split:
//! - a number: edges at the deciles of the non-missing training values, `numpy.quantile` with
//!   `method="linear"` (its default, Hyndman and Fan's type 7) computed as numpy computes it; tied
//!   edges merged; bins closed on the right, `(-inf, e1], (e1, e2], ..., (e_last, +inf)`; then a
//!   missing bin;
//! - a category: one bin per training level (most frequent first), then an unseen bin and a
//!   missing bin, both empty in training by construction of the first.
//!
//! The score is P(positive class) for a binary model, the prediction for a regression model
//! (decile bins as above, no missing bin in use), and the decided class for a multiclass model.
//! Nothing here is random; `verify` re-derives the file. The bins themselves are `data/bins.rs`;
//! the features' bins are computed by the first pass, while each column is in memory.

use serde::{Deserialize, Serialize};

pub(crate) use crate::data::bins::{numeric_bins, BinnedColumn, Binner, Bins};
use crate::error::Result;
use crate::manifest::Task;

/// The first results layout with `profile.json`.
pub(crate) const PROFILE_FROM: u32 = 7;

/// `profile.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ReferenceProfile {
    /// How the numeric edges were placed, in words.
    pub method: String,
    /// Rows the features were counted on (the training split).
    pub training_rows: usize,
    /// Rows the score was counted on (the test split).
    pub test_rows: usize,
    /// Every raw feature, in input order.
    pub features: Vec<BinnedColumn>,
    /// What the score is: `probability of <label>`, `prediction` or `decided class`.
    pub score_means: String,
    pub score: BinnedColumn,
    /// Calibration in the large on the test split (and, binary, on each side of the deployed
    /// threshold): what a batch's outcomes are set against.
    pub calibration: Vec<CalibrationSummary>,
}

/// Mean prediction against mean outcome over a set of rows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct CalibrationSummary {
    /// Which rows and which quantity, in words.
    pub what: String,
    pub rows: usize,
    pub mean_predicted: f64,
    pub observed: f64,
    /// The variance of the mean residual (outcome minus prediction): their sample variance over
    /// the rows.
    pub residual_variance: f64,
}

impl CalibrationSummary {
    fn of(what: String, predicted: &[f64], observed: &[f64]) -> Self {
        let n = predicted.len();
        let nf = n.max(1) as f64;
        let mean_predicted = predicted.iter().sum::<f64>() / nf;
        let mean_observed = observed.iter().sum::<f64>() / nf;
        let gap = mean_observed - mean_predicted;
        let sum_sq = observed.iter().zip(predicted).map(|(y, p)| (y - p - gap) * (y - p - gap)).sum::<f64>();
        let residual_variance = if n > 1 { sum_sq / (nf - 1.0) / nf } else { 0.0 };
        CalibrationSummary { what, rows: n, mean_predicted, observed: mean_observed, residual_variance }
    }

    /// Observed minus predicted.
    pub(crate) fn gap(&self) -> f64 {
        self.observed - self.mean_predicted
    }
}

/// Calibration in the large of outputs (k per row) against labels: per class the mean
/// probability against the class's share (binary: the positive class only, also on each side of
/// `threshold`), for regression the mean prediction against the mean outcome.
pub(crate) fn calibration_summaries(
    outputs: &[f64],
    labels: &crate::training::Labels,
    class_labels: &[String],
    threshold: Option<f64>,
) -> Vec<CalibrationSummary> {
    use crate::training::Labels;
    match labels {
        Labels::Values(y) => vec![CalibrationSummary::of("mean outcome, every row".into(), outputs, y)],
        Labels::Classes { rows, classes } => {
            let k = *classes;
            let mut out = Vec::new();
            for c in usize::from(k == 2)..k {
                let p: Vec<f64> = outputs.chunks_exact(k).map(|r| r[c]).collect();
                let y: Vec<f64> = rows.iter().map(|&l| f64::from(u8::from(l == c))).collect();
                let label = class_labels.get(c).cloned().unwrap_or_default();
                out.push(CalibrationSummary::of(format!("share of {label}, every row"), &p, &y));
                if let (Some(t), 2) = (threshold, k) {
                    let t_text = crate::format::sig(t, 4);
                    for (side, above) in
                        [(format!("decided {label} (p >= {t_text})"), true), (format!("not decided {label} (p < {t_text})"), false)]
                    {
                        let idx: Vec<usize> = (0..p.len()).filter(|&i| (p[i] >= t) == above).collect();
                        let sp: Vec<f64> = idx.iter().map(|&i| p[i]).collect();
                        let sy: Vec<f64> = idx.iter().map(|&i| y[i]).collect();
                        out.push(CalibrationSummary::of(format!("share of {label}, {side}"), &sp, &sy));
                    }
                }
            }
            out
        }
    }
}

pub(crate) const METHOD: &str = "numeric edges: numpy.quantile(values, [0.1, ..., 0.9], method=\"linear\") of the non-missing reference values, tied edges merged; bins closed on the right: (-inf, e1], (e1, e2], ..., (e_last, +inf); then a missing bin. Categories: one bin per training level, then unseen, then missing";

/// The score a model's outputs (k per row) are profiled by, one value per row: P(positive) for a
/// binary model, the prediction for regression, the decided class index for multiclass.
pub(crate) fn scores(task: Task, outputs: &[f64], k: usize) -> Vec<f64> {
    match task {
        Task::Binary => outputs.chunks_exact(k).map(|r| r[1]).collect(),
        Task::Regression => outputs.to_vec(),
        Task::Multiclass => outputs.chunks_exact(k).map(|r| crate::metrics::classification::argmax(r) as f64).collect(),
    }
}

/// Adds scores (as [`scores`] gives them) to the score's bins.
pub(crate) fn tally_scores(task: Task, bins: &Bins, scores: &[f64], counts: &mut [u64]) {
    for &s in scores {
        let bin = if task == Task::Multiclass { s as usize } else { bins.of_number(Some(s)) };
        counts[bin] += 1;
    }
}

/// The profile of an experiment: features on the training rows, the score on the test rows'
/// deployed outputs.
pub(crate) fn derive(prepared: &crate::experiment::prepared::Prepared, derived: &crate::selection::Derived) -> Result<ReferenceProfile> {
    let exp = &prepared.exp;
    let task = exp.manifest.data.task;
    let train = &exp.splits.train;
    let features = exp.training_profile.clone();
    let labels: Vec<String> = match &exp.target {
        crate::data::roles::Target::Classes { labels, .. } => labels.clone(),
        crate::data::roles::Target::Values(_) => Vec::new(),
    };
    let k = exp.head().values_per_row();
    let test_scores = scores(task, &derived.test_outputs, k);
    let (score_means, bins) = match task {
        Task::Binary => (format!("probability of {}", labels.get(1).cloned().unwrap_or_default()), numeric_bins(&test_scores)),
        Task::Regression => ("prediction".to_string(), numeric_bins(&test_scores)),
        Task::Multiclass => ("decided class".to_string(), Bins::Levels { levels: labels.clone() }),
    };
    let mut counts = vec![0u64; bins.len()];
    tally_scores(task, &bins, &test_scores, &mut counts);
    let threshold = (task == Task::Binary).then(|| derived.selection.deployed_threshold(crate::store::FORMAT_VERSION).value);
    let calibration = calibration_summaries(&derived.test_outputs, &exp.labels(&exp.splits.test), &labels, threshold);
    Ok(ReferenceProfile {
        calibration,
        method: METHOD.into(),
        training_rows: train.len(),
        test_rows: test_scores.len(),
        features,
        score_means,
        score: BinnedColumn { name: "score".into(), bins, counts },
    })
}
