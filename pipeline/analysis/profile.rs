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
//! Nothing here is random; `verify` re-derives the file.

use crate::metrics::order_statistics::values_at_ranks;
use rayon::prelude::*;
use std::collections::HashMap;

use serde::{Deserialize, Serialize};

use crate::data::prep::InputEncoding;
use crate::data::table::{Column, ColumnValues};
use crate::error::Result;
use crate::manifest::Task;

/// The first results layout with `profile.json`.
pub(crate) const PROFILE_FROM: u32 = 7;

/// The quantiles numeric edges are placed at.
pub(crate) const DECILES: [f64; 9] = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9];

/// How a column's values fall into bins.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub(crate) enum Bins {
    /// `edges.len() + 1` value bins closed on the right, then the missing bin.
    Numeric {
        edges: Vec<f64>,
        /// Smallest and largest non-missing value of the reference rows.
        min: f64,
        max: f64,
    },
    /// One bin per level, then the unseen bin, then the missing bin.
    Levels { levels: Vec<String> },
}

impl Bins {
    /// Every bin, value bins first, then (levels) unseen, then missing.
    pub(crate) fn len(&self) -> usize {
        match self {
            Bins::Numeric { edges, .. } => edges.len() + 2,
            Bins::Levels { levels } => levels.len() + 2,
        }
    }

    pub(crate) fn missing_bin(&self) -> usize {
        self.len() - 1
    }

    /// The unseen-level bin of a categorical column.
    pub(crate) fn unseen_bin(&self) -> Option<usize> {
        matches!(self, Bins::Levels { .. }).then(|| self.len() - 2)
    }

    /// The bin of a number (`None` or not finite: missing).
    pub(crate) fn of_number(&self, value: Option<f64>) -> usize {
        match (self, value) {
            (Bins::Numeric { edges, .. }, Some(v)) if v.is_finite() => edges.partition_point(|e| *e < v),
            _ => self.missing_bin(),
        }
    }

    /// A short label per bin, for tables and figures.
    pub(crate) fn labels(&self) -> Vec<String> {
        let mut out = Vec::with_capacity(self.len());
        match self {
            Bins::Numeric { edges, .. } => {
                let g = |x: f64| crate::format::sig(x, 4);
                if edges.is_empty() {
                    out.push("every value".into());
                } else {
                    out.push(format!("<= {}", g(edges[0])));
                    for w in edges.windows(2) {
                        out.push(format!("({}, {}]", g(w[0]), g(w[1])));
                    }
                    out.push(format!("> {}", g(edges[edges.len() - 1])));
                }
            }
            Bins::Levels { levels } => {
                out.extend(levels.iter().cloned());
                out.push("(unseen level)".into());
            }
        }
        out.push("(missing)".into());
        out
    }
}

/// One binned column and its reference counts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct BinnedColumn {
    pub name: String,
    pub bins: Bins,
    /// Rows per bin, in [`Bins::len`] order.
    pub counts: Vec<u64>,
}

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

/// numpy's `quantile(sorted, q, method="linear")`, computed as numpy computes it: virtual index
/// `(n - 1) q`, and its `_lerp`, which interpolates from the upper neighbour when the fraction is
/// at least one half, so the edges equal numpy's to the last bit.
#[cfg(test)]
pub(crate) fn numpy_linear_quantile(sorted: &[f64], q: f64) -> f64 {
    let [lo, hi] = numpy_linear_ranks(sorted.len(), q);
    numpy_linear_between(sorted.len(), q, sorted[lo], sorted[hi])
}

/// The two sorted positions [`numpy_linear_quantile`] reads for `n` values.
fn numpy_linear_ranks(n: usize, q: f64) -> [usize; 2] {
    let lo = (((n - 1) as f64 * q).floor() as usize).min(n - 1);
    [lo, (lo + 1).min(n - 1)]
}

/// [`numpy_linear_quantile`] from the two values it reads ([`numpy_linear_ranks`]).
fn numpy_linear_between(n: usize, q: f64, a: f64, b: f64) -> f64 {
    let virtual_index = (n - 1) as f64 * q;
    let t = virtual_index - virtual_index.floor();
    let diff = b - a;
    if t >= 0.5 {
        b - diff * (1.0 - t)
    } else {
        a + diff * t
    }
}

/// Decile bins of the values (any order; none missing), the order statistics found by radix
/// selection (`metrics::order_statistics`): the edges a sort gives, bit for bit.
pub(crate) fn numeric_bins(values: &[f64]) -> Bins {
    let n = values.len();
    if n == 0 {
        return Bins::Numeric { edges: Vec::new(), min: f64::NAN, max: f64::NAN };
    }
    let mut ranks: Vec<usize> = DECILES.iter().flat_map(|&q| numpy_linear_ranks(n, q)).collect();
    ranks.extend([0, n - 1]);
    let at = values_at_ranks(values, &ranks);
    let mut edges: Vec<f64> =
        DECILES.iter().zip(at.chunks_exact(2)).map(|(&q, pair)| numpy_linear_between(n, q, pair[0], pair[1])).collect();
    edges.dedup();
    Bins::Numeric { edges, min: at[2 * DECILES.len()], max: at[2 * DECILES.len() + 1] }
}

/// Assigns the rows of a column (or of a chunk of one) to bins, looking text levels up once per
/// level rather than once per row.
pub(crate) struct Binner<'a> {
    bins: &'a Bins,
    levels: HashMap<&'a str, usize>,
}

impl<'a> Binner<'a> {
    pub(crate) fn new(bins: &'a Bins) -> Self {
        let levels = match bins {
            Bins::Levels { levels } => levels.iter().enumerate().map(|(i, l)| (l.as_str(), i)).collect(),
            Bins::Numeric { .. } => HashMap::new(),
        };
        Binner { bins, levels }
    }

    fn of_label(&self, label: Option<&str>) -> usize {
        match label {
            None => self.bins.missing_bin(),
            Some(l) => self.levels.get(l).copied().unwrap_or(self.bins.len() - 2),
        }
    }

    /// Adds every row of `col` to `counts`.
    pub(crate) fn tally(&self, col: &Column, counts: &mut [u64]) {
        match (self.bins, &col.values) {
            (Bins::Levels { .. }, ColumnValues::Text { codes, levels }) => {
                let by_code: Vec<usize> = levels.iter().map(|l| self.of_label(Some(l))).collect();
                for (r, &code) in codes.iter().enumerate() {
                    let bin = if col.is_valid(r) { by_code[code as usize] } else { self.bins.missing_bin() };
                    counts[bin] += 1;
                }
            }
            (Bins::Levels { .. }, _) => {
                for r in 0..col.len() {
                    counts[self.of_label(col.label(r).as_deref())] += 1;
                }
            }
            (Bins::Numeric { .. }, _) => {
                for r in 0..col.len() {
                    counts[self.bins.of_number(col.number(r))] += 1;
                }
            }
        }
    }
}

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

/// Working memory of one thread binning a training column, per training row: the column's
/// observed values and the selection's gathered keys.
const PROFILE_BYTES_PER_ROW: u64 = 24;

/// One feature's bins and counts over the training rows `train` of its column.
fn binned_feature(enc: &InputEncoding, col: &Column, train: &[usize]) -> BinnedColumn {
    let bins = match enc {
        InputEncoding::Numeric { .. } => numeric_bins(&train.iter().filter_map(|&r| col.number(r)).collect::<Vec<_>>()),
        InputEncoding::Categorical { levels, .. } => Bins::Levels { levels: levels.clone() },
    };
    let mut counts = vec![0u64; bins.len()];
    let binner = Binner::new(&bins);
    for &r in train {
        let bin = match &bins {
            Bins::Numeric { .. } => bins.of_number(col.number(r)),
            Bins::Levels { .. } => binner.of_label(col.label(r).as_deref()),
        };
        counts[bin] += 1;
    }
    BinnedColumn { name: enc.name().to_string(), bins, counts }
}

/// The profile of an experiment: features on the training rows, the score on the test rows'
/// deployed outputs.
pub(crate) fn derive(prepared: &crate::experiment::prepared::Prepared, derived: &crate::selection::Derived) -> Result<ReferenceProfile> {
    let exp = &prepared.exp;
    let task = exp.manifest.data.task;
    let train = &exp.splits.train;
    // Columns are read a window at a time and binned in parallel, one column per thread.
    let pool = crate::threads::helper_pool(PROFILE_BYTES_PER_ROW.saturating_mul(train.len() as u64), "bin the training columns")?;
    let per_read = crate::data::source::columns_per_read(exp.source.rows(), pool.current_num_threads());
    let mut features = Vec::with_capacity(exp.preprocessor.inputs.len());
    for window in exp.preprocessor.inputs.chunks(per_read) {
        let names: Vec<&str> = window.iter().map(InputEncoding::name).collect();
        let columns = crate::data::source::ColumnSource::columns(&exp.source, &names)?;
        let binned: Vec<BinnedColumn> =
            pool.install(|| window.par_iter().zip(columns.par_iter()).map(|(enc, col)| binned_feature(enc, col, train)).collect());
        features.extend(binned);
    }
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn linear_quantiles_match_numpy_worked_values() {
        // numpy.quantile([1, 2, 3, 4], [0.1, 0.5, 0.9]) = [1.3, 2.5, 3.7] (from memory; the
        // CI check compares every stored edge with numpy itself).
        let v = [1.0, 2.0, 3.0, 4.0];
        assert!((numpy_linear_quantile(&v, 0.1) - 1.3).abs() < 1e-15);
        assert_eq!(numpy_linear_quantile(&v, 0.5), 2.5);
        assert!((numpy_linear_quantile(&v, 0.9) - 3.7).abs() < 1e-15);
        assert_eq!(numpy_linear_quantile(&[5.0], 0.3), 5.0);
    }

    #[test]
    fn tied_edges_merge_and_bins_close_on_the_right() {
        let bins = numeric_bins(&vec![1.0; 5].into_iter().chain([2.0, 3.0]).collect::<Vec<_>>());
        let Bins::Numeric { edges, .. } = &bins else { panic!() };
        assert!(edges.windows(2).all(|w| w[0] < w[1]), "{edges:?}");
        assert_eq!(edges[0], 1.0);
        assert_eq!(bins.of_number(Some(1.0)), 0, "a value on an edge falls in the bin it closes");
        assert_eq!(bins.of_number(Some(1.1)), 1, "edges 1, 1.2, 1.8, 2.4");
        assert_eq!(edges.len(), 4);
        assert_eq!(bins.of_number(None), bins.missing_bin());
        assert_eq!(bins.of_number(Some(f64::NAN)), bins.missing_bin());
        let levels = Bins::Levels { levels: vec!["a".into(), "b".into()] };
        let col = Column {
            name: "c".into(),
            source_type: "utf8".into(),
            values: ColumnValues::Text { codes: vec![0, 1, 2, 0], levels: vec!["b".into(), "a".into(), "zz".into()] },
            valid: Some(vec![true, true, true, false]),
        };
        let mut counts = vec![0; levels.len()];
        Binner::new(&levels).tally(&col, &mut counts);
        assert_eq!(counts, vec![1, 1, 1, 1], "a, b, unseen, missing");
    }
}
