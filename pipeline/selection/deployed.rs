//! What is deployed beside the selected run's weights from results layout 5 on: the calibration
//! map fitted on the validation rows (and what it changed on the test split), and a regression
//! model's split conformal prediction interval with its coverage on the test split. Both are
//! fitted without randomness from the stored runs, so `verify` re-derives them bit for bit.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

use crate::calibrate::{conformal, CalibrationMap};
use crate::error::{Error, Result};
use crate::metrics::bootstrap::Interval;
use crate::metrics::calibration::ReliabilityBin;
use crate::metrics::wilson;

/// The first results layout with a fitted calibration, prediction intervals and top-label
/// reliability tables.
pub(crate) const CALIBRATION_FROM: u32 = 5;

/// The metrics a calibration map is judged by, before and after.
pub(crate) const CALIBRATION_METRICS: [&str; 3] = ["ece", "brier", "log_loss"];

/// Where a map or interval was fitted: the validation rows, which also chose the model.
pub(crate) const FITTED_ON_VALIDATION: &str = "validation";

/// A classifier's fitted calibration map and what it did on the test split.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct CalibrationReport {
    /// The map `predict`, the deployed threshold and every test figure use.
    pub map: CalibrationMap,
    pub fitted_on: String,
    pub rows: usize,
    /// Test figures of the network's own probabilities, with 95% bootstrap intervals on the same
    /// resamples as the calibrated figures in the test evaluation (so the two pair row for row).
    pub before: BTreeMap<String, Interval>,
    /// The top-label reliability table of the network's own probabilities.
    pub reliability_before: Vec<ReliabilityBin>,
}

/// A seed ensemble: the mean of every seed's deployed outputs of the selected configuration
/// (Lakshminarayanan, Pritzel & Blundell, NeurIPS 2017, without their adversarial training), and
/// the single best-validation run beside it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct EnsembleReport {
    /// The member runs, in the order their outputs are summed.
    pub members: Vec<String>,
    /// Each member's own calibration map (the same order), when `[calibration]` fits one.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub maps: Vec<CalibrationMap>,
    /// Test figures of the selected run alone, with 95% bootstrap intervals on the same
    /// resamples as the ensemble's.
    pub single_run: BTreeMap<String, Interval>,
}

/// The mean of the members' outputs, element by element: summed in member order, then divided
/// by their number, so `predict` and `train` give the same bits.
pub(crate) fn mean_outputs(members: &[&[f64]]) -> Vec<f64> {
    let Some(first) = members.first() else { return Vec::new() };
    let n = members.len() as f64;
    (0..first.len()).map(|i| members.iter().map(|m| m[i]).fold(0.0, |a, b| a + b) / n).collect()
}

/// A regression model's split conformal interval: prediction +- `half_width`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct IntervalReport {
    /// The declared coverage, 1 - alpha.
    pub coverage: f64,
    pub fitted_on: String,
    /// Held-out residuals it was fitted on, and the rank k = ceil((rows + 1) coverage) of the
    /// one that is the half-width.
    pub rows: usize,
    pub k: usize,
    pub half_width: f64,
    /// Test rows whose target lies inside their interval, of `test_rows`, and that share with
    /// its 95% Wilson interval.
    pub test_rows: usize,
    pub test_covered: usize,
    pub test_coverage: f64,
    pub test_coverage_interval: (f64, f64),
}

/// Fits the interval on validation predictions and targets and measures it on the test split.
pub(crate) fn fit_interval(validation: (&[f64], &[f64]), test: (&[f64], &[f64]), coverage: f64) -> Result<IntervalReport> {
    let residuals: Vec<f64> = validation.0.iter().zip(validation.1).map(|(p, y)| (y - p).abs()).collect();
    let fitted = conformal::half_width(&residuals, coverage).map_err(|e| {
        Error::Usage(format!(
            "[calibration] coverage {coverage}: a split conformal interval needs k = ceil((n + 1) x coverage) = {} held-out residuals, and the validation split has {}",
            e.k, e.n
        ))
    })?;
    let test_covered = test.0.iter().zip(test.1).filter(|(p, y)| (*y - *p).abs() <= fitted.half_width).count();
    let test_rows = test.0.len();
    Ok(IntervalReport {
        coverage,
        fitted_on: FITTED_ON_VALIDATION.into(),
        rows: residuals.len(),
        k: fitted.k,
        half_width: fitted.half_width,
        test_rows,
        test_covered,
        test_coverage: test_covered as f64 / test_rows.max(1) as f64,
        test_coverage_interval: wilson::interval(test_covered, test_rows, wilson::Z95),
    })
}
