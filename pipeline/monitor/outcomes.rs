//! Once outcomes arrive: the card's metrics on the batch's labelled rows with seeded bootstrap
//! intervals, each set against the test interval on the card, and calibration in the large (mean
//! predicted against observed, per class; the mean prediction against the mean outcome for
//! regression) and, for a binary model, on each side of the deployed threshold.
//!
//! Rules (each names the figure that set it):
//! - a metric reads "act" when the batch's whole interval lies on the worse side of the test
//!   interval, "watch" when only the batch's estimate does;
//! - calibration compares the batch's gap (observed minus predicted) with the test split's gap,
//!   stored in `profile.json`: no model is perfectly calibrated, and a large batch would detect
//!   the test split's own small gap; what monitoring asks is whether the gap changed. It reads
//!   "watch" when the change differs from zero at level alpha (normal approximation, the
//!   variance of each mean residual from its rows), "act" when the change is also at least
//!   [`CALIBRATION_ACT_GAP`] (a probability, or that many target standard deviations; our
//!   choice).

use serde::{Deserialize, Serialize};

use super::batch::Observed;
use super::status::{Status, Verdict};
use crate::analysis::profile::{calibration_summaries, CalibrationSummary};
use crate::format::sig;
use crate::metrics::bootstrap::{percentile_intervals, Interval, ResampleOrder};
use crate::metrics::registry::{self, Direction};
use crate::selection::Selection;
use crate::training::Head;

/// A change of the calibration gap at least this large (a probability, or target standard
/// deviations), when significant, reads "act" (our choice).
pub(crate) const CALIBRATION_ACT_GAP: f64 = 0.05;

/// One card metric on the batch against the test split.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct MetricCheck {
    pub metric: String,
    pub higher_is_better: bool,
    pub batch: Interval,
    pub test: Option<Interval>,
    pub verdict: Verdict,
}

/// Calibration in the large on the batch against the same on the test split.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct CalibrationCheck {
    pub batch: CalibrationSummary,
    pub test: Option<CalibrationSummary>,
    /// (batch gap - test gap) over its standard error.
    pub z: f64,
    pub p_value: f64,
    pub verdict: Verdict,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Outcomes {
    pub rows: usize,
    pub unlabelled: usize,
    pub resamples: usize,
    pub bootstrap_seed: u64,
    pub metrics: Vec<MetricCheck>,
    pub calibration: Vec<CalibrationCheck>,
}

fn metric_verdict(name: &str, higher: bool, batch: &Interval, test: Option<&Interval>) -> Verdict {
    let Some(t) = test else { return Verdict::stable(format!("{name}: no test interval to compare with")) };
    let worse = |x: f64, bound: f64| if higher { x < bound } else { x > bound };
    let (far_batch, near_test) = if higher { (batch.upper, t.lower) } else { (batch.lower, t.upper) };
    let figures = format!(
        "{name} {} [{}, {}] on the batch, {} [{}, {}] on the test split",
        sig(batch.estimate, 4),
        sig(batch.lower, 4),
        sig(batch.upper, 4),
        sig(t.estimate, 4),
        sig(t.lower, 4),
        sig(t.upper, 4)
    );
    if worse(far_batch, near_test) {
        Verdict { status: Status::Act, reason: format!("{figures}: the whole batch interval is worse than the test interval") }
    } else if worse(batch.estimate, near_test) {
        Verdict { status: Status::Watch, reason: format!("{figures}: the batch estimate is worse than the test interval") }
    } else {
        Verdict::stable(figures)
    }
}

/// P(|N(0, 1)| >= |z|).
pub(crate) fn two_sided_normal(z: f64) -> f64 {
    libm::erfc(z.abs() / std::f64::consts::SQRT_2)
}

fn calibration_check(batch: CalibrationSummary, test: Option<CalibrationSummary>, sd_unit: Option<f64>, alpha: f64) -> CalibrationCheck {
    let test_gap = test.as_ref().map_or(0.0, CalibrationSummary::gap);
    let change = batch.gap() - test_gap;
    let standard_error = (batch.residual_variance + test.as_ref().map_or(0.0, |t| t.residual_variance)).sqrt();
    let z = if standard_error > 0.0 { change / standard_error } else { 0.0 };
    let p_value = if batch.rows == 0 || test.as_ref().is_some_and(|t| t.rows == 0) { 1.0 } else { two_sided_normal(z) };
    let size = match sd_unit {
        Some(sd) if sd > 0.0 => change.abs() / sd,
        _ => change.abs(),
    };
    let unit = if sd_unit.is_some() { " target sd" } else { "" };
    let figures = format!(
        "{}: observed - predicted {} on the batch, {} on the test split (change {}{unit}, p = {})",
        batch.what,
        sig(batch.gap(), 3),
        test.as_ref().map_or("-".into(), |t| sig(t.gap(), 3)),
        sig(size, 3),
        sig(p_value, 3)
    );
    let verdict = if p_value < alpha && size >= CALIBRATION_ACT_GAP {
        Verdict { status: Status::Act, reason: format!("{figures}: significant at {alpha} and at least {CALIBRATION_ACT_GAP}") }
    } else if p_value < alpha {
        Verdict { status: Status::Watch, reason: format!("{figures}: significant at {alpha}") }
    } else {
        Verdict::stable(figures)
    };
    CalibrationCheck { batch, test, z, p_value, verdict }
}

/// What the deployed model's outcomes on the batch say, set against the test figures of `selection`.
#[allow(clippy::too_many_arguments)]
pub(crate) fn judge(
    observed: &Observed,
    head: Head,
    selection: &Selection,
    class_labels: &[String],
    threshold: Option<f64>,
    target_std: Option<f64>,
    reference: &[CalibrationSummary],
    resamples: usize,
    seed: u64,
    alpha: f64,
    order: ResampleOrder,
) -> Outcomes {
    let n = observed.labels.len();
    let scorer = crate::training::head::ResampleScorer::new(head, &observed.outputs, &observed.labels);
    let bootstrap = || percentile_intervals(n, resamples, 0.95, seed, order, |idx| scorer.metrics(idx));
    // The resamples are scored on helper threads; the intervals are the same at any count.
    let per_thread = crate::selection::BOOTSTRAP_BYTES_PER_ROW.saturating_mul(n as u64);
    let intervals = match crate::threads::helper_pool(per_thread, "score bootstrap resamples") {
        Ok(pool) => pool.install(bootstrap),
        Err(_) => bootstrap(),
    };
    let task = head.task;
    let metrics = registry::table(task)
        .iter()
        .filter(|m| m.on_card)
        .filter_map(|m| {
            let batch = intervals.get(m.name)?.clone();
            let test = selection.test.intervals.get(m.name).cloned();
            let higher = m.direction == Direction::Maximise;
            let verdict = metric_verdict(m.name, higher, &batch, test.as_ref());
            Some(MetricCheck { metric: m.name.to_string(), higher_is_better: higher, batch, test, verdict })
        })
        .collect();
    let sd_unit = (task == crate::manifest::Task::Regression).then(|| target_std.unwrap_or(1.0));
    let calibration = calibration_summaries(&observed.outputs, &observed.labels, class_labels, threshold)
        .into_iter()
        .map(|batch| {
            let test = reference.iter().find(|t| t.what == batch.what).cloned();
            calibration_check(batch, test, sd_unit, alpha)
        })
        .collect();
    Outcomes { rows: n, unlabelled: observed.unlabelled, resamples, bootstrap_seed: seed, metrics, calibration }
}
