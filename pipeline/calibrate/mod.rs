//! Maps fitted after training that turn a network's outputs into what is deployed: calibrated
//! class probabilities (temperature scaling, Platt scaling, isotonic regression) and split
//! conformal intervals for regression. Each is a pure function of held-out outputs and labels,
//! fitted in f64 without randomness, so `verify` reproduces it bit for bit.

pub mod conformal;
pub mod isotonic;
pub mod platt;
pub mod temperature;

use serde::{Deserialize, Serialize};

/// How a classifier's probabilities are recalibrated (`[calibration] method`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum CalibrationMethod {
    /// The network's own probabilities.
    #[default]
    None,
    /// Logits divided by one temperature fitted by log loss (Guo, Pleiss, Sun & Weinberger,
    /// ICML 2017); binary and multiclass.
    Temperature,
    /// A logistic map of the logit fitted to smoothed targets (Platt 1999); binary only.
    Platt,
    /// A non-decreasing step-and-ramp map of the logit (Zadrozny & Elkan 2002); binary only.
    Isotonic,
}

impl CalibrationMethod {
    pub fn as_str(self) -> &'static str {
        match self {
            CalibrationMethod::None => "none",
            CalibrationMethod::Temperature => "temperature",
            CalibrationMethod::Platt => "platt",
            CalibrationMethod::Isotonic => "isotonic",
        }
    }

    /// The fewest held-out rows the method is fitted on. Isotonic regression has one free value
    /// per distinct score and overfits small samples (common practice: scikit-learn's user guide
    /// advises against it well below 1,000 calibration rows, from memory); the one- and
    /// two-parameter maps need far fewer.
    pub fn minimum_rows(self) -> usize {
        match self {
            CalibrationMethod::None => 0,
            CalibrationMethod::Temperature | CalibrationMethod::Platt => 20,
            CalibrationMethod::Isotonic => 200,
        }
    }

    /// Whether the method applies to a model with `classes` classes.
    pub fn applies_to(self, classes: usize) -> bool {
        match self {
            CalibrationMethod::None | CalibrationMethod::Temperature => true,
            CalibrationMethod::Platt | CalibrationMethod::Isotonic => classes == 2,
        }
    }
}

/// A fitted calibration map, stored with the model.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "method", rename_all = "snake_case")]
pub enum CalibrationMap {
    Temperature {
        temperature: f64,
        /// Whether the fit stopped at the bound of the search, [0.01, 100].
        at_bound: bool,
    },
    /// p = 1 / (1 + exp(-(a z + b))) on the logit z.
    Platt { a: f64, b: f64 },
    /// p = linear interpolation of (logits, probabilities), clipped to the end values outside.
    Isotonic { logits: Vec<f64>, probabilities: Vec<f64> },
}

/// Why a map could not be fitted.
#[derive(Debug, Clone, PartialEq)]
pub enum FitError {
    TooFewRows { method: CalibrationMethod, rows: usize, minimum: usize },
    OneClass { method: CalibrationMethod },
    NotForMulticlass { method: CalibrationMethod },
}

impl std::fmt::Display for FitError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            FitError::TooFewRows { method, rows, minimum } => {
                write!(f, "`{}` needs at least {minimum} held-out rows to fit on; the validation split has {rows}", method.as_str())
            }
            FitError::OneClass { method } => {
                write!(f, "`{}` needs held-out rows of more than one class; the validation split has one", method.as_str())
            }
            FitError::NotForMulticlass { method } => {
                write!(f, "`{}` applies to binary models only; use \"temperature\" for a multiclass model", method.as_str())
            }
        }
    }
}

/// Logits of a model with `classes` classes as the rows of a `classes`-wide matrix: a binary
/// network's one logit z becomes [0, z], so one softmax serves both.
pub fn logit_rows(raw: &[f64], classes: usize) -> Vec<f64> {
    if classes == 2 {
        raw.iter().flat_map(|&z| [0.0, z]).collect()
    } else {
        raw.to_vec()
    }
}

/// Fits `method` on held-out raw logits (`classes` per row, one per row for binary models) and
/// their labels. `Ok(None)` for `CalibrationMethod::None`.
pub fn fit(method: CalibrationMethod, raw: &[f64], labels: &[usize], classes: usize) -> Result<Option<CalibrationMap>, FitError> {
    if method == CalibrationMethod::None {
        return Ok(None);
    }
    if !method.applies_to(classes) {
        return Err(FitError::NotForMulticlass { method });
    }
    if labels.len() < method.minimum_rows() {
        return Err(FitError::TooFewRows { method, rows: labels.len(), minimum: method.minimum_rows() });
    }
    if labels.iter().all(|&y| y == labels[0]) {
        return Err(FitError::OneClass { method });
    }
    Ok(Some(match method {
        CalibrationMethod::Temperature => {
            let fit = temperature::fit(&logit_rows(raw, classes), labels, classes);
            CalibrationMap::Temperature { temperature: fit.temperature, at_bound: fit.at_bound }
        }
        CalibrationMethod::Platt => {
            let (a, b) = platt::fit(raw, labels);
            CalibrationMap::Platt { a, b }
        }
        CalibrationMethod::Isotonic => {
            let targets: Vec<f64> = labels.iter().map(|&y| (y == 1) as u8 as f64).collect();
            let fitted = isotonic::Isotonic::fit(raw, &targets);
            CalibrationMap::Isotonic { logits: fitted.thresholds, probabilities: fitted.values }
        }
        CalibrationMethod::None => unreachable!("returned above"),
    }))
}

impl CalibrationMap {
    pub fn method(&self) -> CalibrationMethod {
        match self {
            CalibrationMap::Temperature { .. } => CalibrationMethod::Temperature,
            CalibrationMap::Platt { .. } => CalibrationMethod::Platt,
            CalibrationMap::Isotonic { .. } => CalibrationMethod::Isotonic,
        }
    }

    /// Calibrated probabilities, `classes` per row (binary: [1 - p, p]), of raw logits.
    pub fn apply(&self, raw: &[f64], classes: usize) -> Vec<f64> {
        match self {
            CalibrationMap::Temperature { temperature, .. } => {
                temperature::softmax_rows(&logit_rows(raw, classes), classes, 1.0 / temperature)
            }
            CalibrationMap::Platt { a, b } => raw.iter().flat_map(|&z| two(platt::probability(*a, *b, z))).collect(),
            CalibrationMap::Isotonic { logits, probabilities } => {
                let map = isotonic::Isotonic { thresholds: logits.clone(), values: probabilities.clone() };
                raw.iter().flat_map(|&z| two(map.predict(z))).collect()
            }
        }
    }
}

fn two(p: f64) -> [f64; 2] {
    [1.0 - p, p]
}
