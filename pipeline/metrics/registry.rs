//! The one table of metrics: per task, each metric's name, which way is better, whether the
//! card's validation table shows it, the scale its seed spread is judged on, and the function that
//! computes it. Computation, selection, the card and compare all read this table; adding a metric
//! is one function and one row here (plus its reference value in tests/reference/).

use super::calibration::expected_calibration_error;
use super::classification as c;
use super::regression as r;
use super::resample::Resample;
use super::MetricSet;
use crate::task::Task;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    Maximise,
    Minimise,
}

impl Direction {
    /// The direction a stored `higher_is_better` flag (as `selection.json` records it) names.
    pub fn of_higher_is_better(higher_is_better: bool) -> Self {
        if higher_is_better {
            Direction::Maximise
        } else {
            Direction::Minimise
        }
    }
}

/// The scale a metric's seed spread and train-validation gap are judged against.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Scale {
    /// Bounded in [0, 1] (or, for R², at most 1): the range itself.
    Unit,
    /// Log loss: the log loss of predicting the class shares.
    ClassPriorLogLoss,
    /// RMSE and MAE: the target's standard deviation.
    TargetSd,
}

/// What a metric is computed from: class probabilities (row-major, `k` per row) with their
/// labels and arg-max predictions, or predicted and true values; or a bootstrap resample of a
/// prepared classified sample, scored in linear time with the bits of its rows (`resample`).
pub enum Scored<'a> {
    Classes { labels: &'a [usize], probs: &'a [f64], k: usize, predicted: &'a [usize], is_positive: &'a [bool], p_positive: &'a [f64] },
    Values { truth: &'a [f64], predicted: &'a [f64] },
    Resample(&'a Resample<'a>),
}

pub struct Metric {
    pub name: &'static str,
    pub direction: Direction,
    /// A column of the card's validation table, in table order.
    pub on_card: bool,
    pub scale: Scale,
    pub compute: fn(&Scored) -> Option<f64>,
    /// The per-row copy of a classifier's outputs it reads besides the labels and probabilities.
    pub reads: Reads,
}

/// What a classification metric reads of [`Scored::Classes`] besides `labels`, `probs` and `k`,
/// so that [`classification_metrics`] holds one per-row copy at a time: over millions of rows,
/// the decided classes (8 bytes a row) and the positive-class scores (9) would otherwise coexist
/// and set a run's peak memory.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Reads {
    /// Nothing more (and every regression metric).
    Outputs,
    /// `predicted`, the arg-max classes.
    Decisions,
    /// `is_positive` and `p_positive` (binary).
    Positives,
}

fn classes(s: &Scored, f: impl Fn(&[usize], &[f64], usize, &[usize]) -> Option<f64>) -> Option<f64> {
    match s {
        Scored::Classes { labels, probs, k, predicted, .. } => f(labels, probs, *k, predicted),
        Scored::Values { .. } | Scored::Resample(_) => None,
    }
}

fn positives(s: &Scored, f: impl Fn(&[bool], &[f64]) -> Option<f64>) -> Option<f64> {
    match s {
        Scored::Classes { is_positive, p_positive, .. } => f(is_positive, p_positive),
        Scored::Values { .. } | Scored::Resample(_) => None,
    }
}

fn values(s: &Scored, f: impl Fn(&[f64], &[f64]) -> Option<f64>) -> Option<f64> {
    match s {
        Scored::Values { truth, predicted } => f(truth, predicted),
        Scored::Classes { .. } | Scored::Resample(_) => None,
    }
}

/// A classification metric: of a resample from its prepared sample, else of the rows given.
fn classified(s: &Scored, resampled: impl Fn(&Resample) -> Option<f64>, rows: fn(&Scored) -> Option<f64>) -> Option<f64> {
    match s {
        Scored::Resample(r) => resampled(r),
        _ => rows(s),
    }
}

const fn metric(name: &'static str, direction: Direction, on_card: bool, scale: Scale, compute: fn(&Scored) -> Option<f64>) -> Metric {
    Metric { name, direction, on_card, scale, compute, reads: Reads::Outputs }
}

impl Metric {
    const fn reading(self, reads: Reads) -> Metric {
        Metric { reads, ..self }
    }
}

use Direction::{Maximise, Minimise};

const ACCURACY: fn(&Scored) -> Option<f64> = |s| classified(s, |r| r.accuracy(), |s| classes(s, |l, _, _, p| c::accuracy(l, p)));
const BALANCED_ACCURACY: fn(&Scored) -> Option<f64> =
    |s| classified(s, |r| r.balanced_accuracy(), |s| classes(s, |l, _, k, p| c::balanced_accuracy(l, p, k)));
const LOG_LOSS: fn(&Scored) -> Option<f64> = |s| classified(s, |r| r.log_loss(), |s| classes(s, |l, pr, k, _| c::log_loss(l, pr, k)));
const BRIER: fn(&Scored) -> Option<f64> = |s| classified(s, |r| r.brier(), |s| classes(s, |l, pr, k, _| c::brier(l, pr, k)));
/// Top-label ECE, 10 equal-width bins closed on the right (see `calibration`).
const ECE: fn(&Scored) -> Option<f64> =
    |s| classified(s, |r| r.ece(), |s| classes(s, |l, pr, k, _| expected_calibration_error(l, pr, k, 10)));

/// Binary, in card column order; the first is the default selection metric.
const BINARY: &[Metric] = &[
    metric("roc_auc", Maximise, true, Scale::Unit, |s| classified(s, |r| r.roc_auc(), |s| positives(s, c::roc_auc)))
        .reading(Reads::Positives),
    metric("average_precision", Maximise, true, Scale::Unit, |s| {
        classified(s, |r| r.average_precision(), |s| positives(s, c::average_precision))
    })
    .reading(Reads::Positives),
    metric("log_loss", Minimise, true, Scale::ClassPriorLogLoss, LOG_LOSS),
    metric("brier", Minimise, true, Scale::Unit, BRIER),
    metric("ece", Minimise, true, Scale::Unit, ECE),
    metric("accuracy", Maximise, true, Scale::Unit, ACCURACY).reading(Reads::Decisions),
    metric("balanced_accuracy", Maximise, false, Scale::Unit, BALANCED_ACCURACY).reading(Reads::Decisions),
];

const MULTICLASS: &[Metric] = &[
    metric("log_loss", Minimise, true, Scale::ClassPriorLogLoss, LOG_LOSS),
    metric("accuracy", Maximise, true, Scale::Unit, ACCURACY).reading(Reads::Decisions),
    metric("balanced_accuracy", Maximise, true, Scale::Unit, BALANCED_ACCURACY).reading(Reads::Decisions),
    metric("roc_auc", Maximise, true, Scale::Unit, |s| {
        classified(s, |r| r.roc_auc(), |s| classes(s, |l, pr, k, _| c::macro_ovr_auc(l, pr, k)))
    }),
    metric("ece", Minimise, true, Scale::Unit, ECE),
    metric("brier", Minimise, false, Scale::Unit, BRIER),
];

const REGRESSION: &[Metric] = &[
    metric("rmse", Minimise, true, Scale::TargetSd, |s| values(s, r::rmse)),
    metric("mae", Minimise, true, Scale::TargetSd, |s| values(s, r::mae)),
    metric("r2", Maximise, true, Scale::Unit, |s| values(s, r::r2)),
];

/// Every metric of a task, the default selection metric first.
pub fn table(task: Task) -> &'static [Metric] {
    match task {
        Task::Binary => BINARY,
        Task::Multiclass => MULTICLASS,
        Task::Regression => REGRESSION,
    }
}

pub fn find(task: Task, name: &str) -> Option<&'static Metric> {
    table(task).iter().find(|m| m.name == name)
}

/// What a metric says, in plain words, for the card's readers (the definitions the metric
/// modules implement).
pub fn meaning(name: &str) -> Option<&'static str> {
    Some(match name {
        "roc_auc" => "ROC AUC is the chance that a randomly chosen positive row is scored above a randomly chosen negative one (0.5 is chance, 1 is perfect; for several classes, the mean of each class against the rest)",
        "average_precision" => "average precision is the precision averaged over every recall level as the threshold falls, the area under the precision-recall curve (chance is the positive class's share)",
        "log_loss" => "log loss is the mean of minus the natural log of the probability given to the true class; lower is better, 0 is perfect, and confident mistakes cost most",
        "brier" => "the Brier score is the mean squared difference between the predicted probabilities and what happened (1 for the true class, 0 otherwise; binary: the positive class only); lower is better",
        "ece" => "ECE (expected calibration error) is the gap between the predicted probability of the decided class and how often that class is right, averaged over 10 equal-width bins weighted by their rows; lower is better",
        "accuracy" => "accuracy is the share of rows whose decided class is right",
        "balanced_accuracy" => "balanced accuracy is the mean over classes of the share of each class's rows decided right, so a rare class counts as much as a common one",
        "rmse" => "RMSE is the square root of the mean squared error, in the target's units; lower is better and large errors weigh most",
        "mae" => "MAE is the mean absolute error, in the target's units; lower is better",
        "r2" => "R² is the share of the target's variance on these rows that the predictions explain (0: no better than the mean; 1: perfect; it can be negative)",
        _ => return None,
    })
}

/// Metric names for a task, the default selection metric first.
pub fn names(task: Task) -> Vec<&'static str> {
    table(task).iter().map(|m| m.name).collect()
}

pub fn direction(task: Task, name: &str) -> Option<Direction> {
    find(task, name).map(|m| m.direction)
}

pub fn default_selection_metric(task: Task) -> &'static str {
    table(task)[0].name
}

/// True when `a` is strictly better than `b` in `direction`.
pub fn better(direction: Direction, a: f64, b: f64) -> bool {
    match direction {
        Direction::Maximise => a > b,
        Direction::Minimise => a < b,
    }
}

/// Every metric of `task` on `scored`, by name.
pub fn scalar_metrics(task: Task, scored: &Scored) -> MetricSet {
    metrics_where(task, scored, |_| true)
}

/// The metrics of `task`'s table that `keep` keeps, on `scored`, by name.
fn metrics_where(task: Task, scored: &Scored, keep: impl Fn(&Metric) -> bool) -> MetricSet {
    table(task).iter().filter(|m| keep(m)).map(|m| (m.name.to_string(), (m.compute)(scored))).collect()
}

/// Every classification metric of the table (binary when `k == 2`) of class probabilities
/// (`k` per row) against class indices, by name.
/// Each metric gets the per-row copy it reads ([`Reads`]), built for its group and dropped
/// before the next group's.
pub fn classification_metrics(labels: &[usize], probs: &[f64], k: usize) -> MetricSet {
    let task = if k == 2 { Task::Binary } else { Task::Multiclass };
    let mut out = MetricSet::new();
    let mut group = |reads: Reads, scored: &Scored| out.extend(metrics_where(task, scored, |m| m.reads == reads));
    group(Reads::Outputs, &Scored::Classes { labels, probs, k, predicted: &[], is_positive: &[], p_positive: &[] });
    {
        let (is_positive, p_positive): (Vec<bool>, Vec<f64>) =
            if k == 2 { labels.iter().map(|&y| y == 1).zip(probs.chunks_exact(2).map(|r| r[1])).unzip() } else { (Vec::new(), Vec::new()) };
        group(Reads::Positives, &Scored::Classes { labels, probs, k, predicted: &[], is_positive: &is_positive, p_positive: &p_positive });
    }
    let predicted = super::classification::predicted_classes(probs, k);
    group(Reads::Decisions, &Scored::Classes { labels, probs, k, predicted: &predicted, is_positive: &[], p_positive: &[] });
    out
}

/// [`classification_metrics`] of a bootstrap resample of a prepared sample: the same bits, in
/// linear time (`resample`).
pub fn resample_metrics(resample: &Resample) -> MetricSet {
    let task = if resample.classes() == 2 { Task::Binary } else { Task::Multiclass };
    scalar_metrics(task, &Scored::Resample(resample))
}

/// The metrics of the table named in `names` of a bootstrap resample, with the bits
/// [`resample_metrics`] gives them; the others are not computed.
pub fn named_resample_metrics(resample: &Resample, names: &[&str]) -> MetricSet {
    let task = if resample.classes() == 2 { Task::Binary } else { Task::Multiclass };
    metrics_where(task, &Scored::Resample(resample), |m| names.contains(&m.name))
}

/// Every regression metric of the table, by name.
pub fn regression_metrics(truth: &[f64], predicted: &[f64]) -> MetricSet {
    scalar_metrics(Task::Regression, &Scored::Values { truth, predicted })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Each metric declares what it reads: computed group by group, with only that copy present,
    /// every metric has the bits it has with every copy present.
    #[test]
    fn metrics_by_what_they_read_equal_metrics_with_everything_present() {
        let mut stream = crate::rng::Stream::new(4, crate::rng::Purpose::DemoData);
        for k in [2usize, 3] {
            let n = 500;
            let probs: Vec<f64> = (0..n)
                .flat_map(|_| {
                    let w: Vec<f64> = (0..k).map(|_| 1.0 + stream.below(7) as f64).collect();
                    let total: f64 = w.iter().sum();
                    w.into_iter().map(move |v| v / total)
                })
                .collect();
            let labels: Vec<usize> = (0..n).map(|_| stream.below(k as u64) as usize).collect();
            let predicted = super::super::classification::predicted_classes(&probs, k);
            let (is_positive, p_positive): (Vec<bool>, Vec<f64>) = if k == 2 {
                labels.iter().map(|&y| y == 1).zip(probs.chunks_exact(2).map(|r| r[1])).unzip()
            } else {
                (Vec::new(), Vec::new())
            };
            let task = if k == 2 { Task::Binary } else { Task::Multiclass };
            let everything = Scored::Classes {
                labels: &labels,
                probs: &probs,
                k,
                predicted: &predicted,
                is_positive: &is_positive,
                p_positive: &p_positive,
            };
            let want = scalar_metrics(task, &everything);
            let got = classification_metrics(&labels, &probs, k);
            assert_eq!(want.keys().collect::<Vec<_>>(), got.keys().collect::<Vec<_>>());
            for (name, v) in &want {
                assert!(v.is_some(), "{name} is defined here");
                assert_eq!(v.map(f64::to_bits), got[name].map(f64::to_bits), "k {k}: {name}");
            }
        }
    }

    #[test]
    fn every_task_table_has_unique_names_and_a_default_first() {
        for task in [Task::Binary, Task::Multiclass, Task::Regression] {
            let mut names = names(task);
            assert_eq!(default_selection_metric(task), names[0]);
            names.sort_unstable();
            names.dedup();
            assert_eq!(names.len(), table(task).len(), "{task:?}");
        }
    }
}
