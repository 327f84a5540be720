//! Once outcomes arrive: the card's metrics on the batch's labelled rows with seeded bootstrap
//! intervals, each set against the test interval on the card, and calibration in the large (mean
//! predicted against observed, per class; the mean prediction against the mean outcome for
//! regression) and, for a binary model, on each side of the deployed threshold.
//!
//! Rules (each names the figure that set it):
//! - a metric reads "act" when the batch's whole interval lies on the worse side of the test
//!   interval, "watch" when only the batch's estimate does;
//! - calibration reads "watch" when the observed count differs from the expected one at level
//!   alpha (a normal approximation to the sum of Bernoulli outcomes, variance Σ p(1 - p); for
//!   regression the mean residual over its standard error), "act" when it also differs by at
//!   least [`CALIBRATION_ACT_GAP`] (probability) or that many target standard deviations (our
//!   choice).

use serde::{Deserialize, Serialize};

use super::batch::Observed;
use super::status::{Status, Verdict};
use crate::format::sig;
use crate::metrics::bootstrap::{percentile_intervals, Interval};
use crate::metrics::registry::{self, Direction};
use crate::selection::Selection;
use crate::training::{Head, Labels};

/// A calibration gap at least this large (observed minus predicted share, or mean residual in
/// target standard deviations), when significant, reads "act" (our choice).
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

/// Mean prediction against the observed outcome over a set of rows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct CalibrationCheck {
    /// Which rows and which quantity, in words.
    pub what: String,
    pub rows: usize,
    pub mean_predicted: f64,
    pub observed: f64,
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

fn subset(outputs: &[f64], labels: &Labels, k: usize, idx: &[usize]) -> (Vec<f64>, Labels) {
    let out = idx.iter().flat_map(|&i| outputs[i * k..(i + 1) * k].iter().copied()).collect();
    let labels = match labels {
        Labels::Classes { rows, classes } => Labels::Classes { rows: idx.iter().map(|&i| rows[i]).collect(), classes: *classes },
        Labels::Values(v) => Labels::Values(idx.iter().map(|&i| v[i]).collect()),
    };
    (out, labels)
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

fn calibration_check(what: String, predicted: &[f64], observed: &[f64], sd_unit: Option<f64>, alpha: f64) -> CalibrationCheck {
    let n = predicted.len();
    let nf = n.max(1) as f64;
    let mean_predicted = predicted.iter().sum::<f64>() / nf;
    let mean_observed = observed.iter().sum::<f64>() / nf;
    let gap = mean_observed - mean_predicted;
    let standard_error = match sd_unit {
        // Regression: the residuals' standard deviation over √n.
        Some(_) => {
            let residuals: Vec<f64> = observed.iter().zip(predicted).map(|(y, p)| y - p).collect();
            let var = residuals.iter().map(|r| (r - gap) * (r - gap)).sum::<f64>() / (nf - 1.0).max(1.0);
            (var / nf).sqrt()
        }
        // A sum of Bernoulli outcomes with these probabilities, as a share.
        None => predicted.iter().map(|p| p * (1.0 - p)).sum::<f64>().sqrt() / nf,
    };
    let z = if standard_error > 0.0 { gap / standard_error } else { 0.0 };
    let p_value = if n == 0 { 1.0 } else { two_sided_normal(z) };
    let size = match sd_unit {
        Some(sd) if sd > 0.0 => gap.abs() / sd,
        _ => gap.abs(),
    };
    let unit = if sd_unit.is_some() { " target sd" } else { "" };
    let figures = format!(
        "{what}: observed {}, predicted {} (gap {}{unit}, p = {})",
        sig(mean_observed, 4),
        sig(mean_predicted, 4),
        sig(size, 3),
        sig(p_value, 3)
    );
    let verdict = if n > 0 && p_value < alpha && size >= CALIBRATION_ACT_GAP {
        Verdict { status: Status::Act, reason: format!("{figures}: significant at {alpha} and at least {CALIBRATION_ACT_GAP}") }
    } else if n > 0 && p_value < alpha {
        Verdict { status: Status::Watch, reason: format!("{figures}: significant at {alpha}") }
    } else {
        Verdict::stable(figures)
    };
    CalibrationCheck { what, rows: n, mean_predicted, observed: mean_observed, z, p_value, verdict }
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
    resamples: usize,
    seed: u64,
    alpha: f64,
) -> Outcomes {
    let k = head.values_per_row();
    let n = observed.labels.len();
    let bootstrap = || {
        percentile_intervals(n, resamples, 0.95, seed, |idx| {
            let (o, y) = subset(&observed.outputs, &observed.labels, k, idx);
            head.metrics(&o, &y)
        })
    };
    // The resamples are scored on a few helper threads; the intervals are the same at any count.
    let intervals = match crate::threads::helper_pool(crate::selection::MAX_BOOTSTRAP_THREADS, "score bootstrap resamples") {
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
    let mut calibration = Vec::new();
    match &observed.labels {
        Labels::Values(y) => {
            calibration.push(calibration_check(
                "mean outcome, every row".into(),
                &observed.outputs,
                y,
                Some(target_std.unwrap_or(1.0)),
                alpha,
            ));
        }
        Labels::Classes { rows, classes } => {
            let first = if *classes == 2 { 1 } else { 0 };
            for c in first..*classes {
                let p: Vec<f64> = observed.outputs.chunks_exact(k).map(|r| r[c]).collect();
                let y: Vec<f64> = rows.iter().map(|&l| f64::from(u8::from(l == c))).collect();
                let label = class_labels.get(c).cloned().unwrap_or_default();
                calibration.push(calibration_check(format!("share of {label}, every row"), &p, &y, None, alpha));
                if let (Some(t), 2) = (threshold, *classes) {
                    for (side, above) in [
                        (format!("decided {label} (p >= {})", sig(t, 4)), true),
                        (format!("not decided {label} (p < {})", sig(t, 4)), false),
                    ] {
                        let idx: Vec<usize> = (0..p.len()).filter(|&i| (p[i] >= t) == above).collect();
                        let sp: Vec<f64> = idx.iter().map(|&i| p[i]).collect();
                        let sy: Vec<f64> = idx.iter().map(|&i| y[i]).collect();
                        calibration.push(calibration_check(format!("share of {label}, {side}"), &sp, &sy, None, alpha));
                    }
                }
            }
        }
    }
    Outcomes { rows: n, unlabelled: observed.unlabelled, resamples, bootstrap_seed: seed, metrics, calibration }
}
