//! What a task's network outputs and how outputs become predictions, losses and metrics: the
//! [`Head`] (stored as the loss it trains with), the [`Labels`] a matrix's rows carry, and the
//! standardisation of a regression target ([`TargetScaling`]).

use serde::{Deserialize, Serialize};

use crate::manifest::{RegressionLoss, Task};
use crate::metrics::resample::ClassifiedSample;
use crate::metrics::{registry, MetricSet};

/// Targets aligned with the rows of a matrix.
#[derive(Debug, Clone, PartialEq)]
pub enum Labels {
    Classes { rows: Vec<usize>, classes: usize },
    Values(Vec<f64>),
}

impl Labels {
    pub fn len(&self) -> usize {
        match self {
            Labels::Classes { rows, .. } => rows.len(),
            Labels::Values(v) => v.len(),
        }
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// The outputs (`k` per row) and labels of rows `idx`, in that order; repeats allowed, as in a
/// bootstrap resample.
pub(crate) fn rows_of(outputs: &[f64], labels: &Labels, k: usize, idx: &[usize]) -> (Vec<f64>, Labels) {
    let out = idx.iter().flat_map(|&i| outputs[i * k..(i + 1) * k].iter().copied()).collect();
    let labels = match labels {
        Labels::Classes { rows, classes } => Labels::Classes { rows: idx.iter().map(|&i| rows[i]).collect(), classes: *classes },
        Labels::Values(v) => Labels::Values(idx.iter().map(|&i| v[i]).collect()),
    };
    (out, labels)
}

/// Scores bootstrap resamples of one sample (outputs, `k` per row, and labels) with the bits of
/// [`Head::metrics`] on each resample's rows; a classified sample is prepared once, so each
/// resample costs linear time and no copy of its rows (`metrics::resample`).
pub(crate) struct ResampleScorer<'a> {
    head: Head,
    outputs: &'a [f64],
    labels: &'a Labels,
    classified: Option<ClassifiedSample<'a>>,
}

impl<'a> ResampleScorer<'a> {
    pub(crate) fn new(head: Head, outputs: &'a [f64], labels: &'a Labels) -> Self {
        let classified = match labels {
            Labels::Classes { rows, classes } => Some(ClassifiedSample::new(rows, outputs, *classes)),
            Labels::Values(_) => None,
        };
        ResampleScorer { head, outputs, labels, classified }
    }

    /// Every metric of the resample `idx` (sample rows, repeats allowed).
    pub(crate) fn metrics(&self, idx: &[usize]) -> MetricSet {
        match &self.classified {
            Some(sample) => registry::resample_metrics(&sample.resample(idx)),
            None => {
                let (out, labels) = rows_of(self.outputs, self.labels, self.head.values_per_row(), idx);
                self.head.metrics(&out, &labels)
            }
        }
    }

    /// The metrics named in `names` of the resample `idx`, with the bits [`Self::metrics`] gives
    /// them; a classified sample computes no other.
    pub(crate) fn named_metrics(&self, idx: &[usize], names: &[&str]) -> MetricSet {
        match &self.classified {
            Some(sample) => registry::named_resample_metrics(&sample.resample(idx), names),
            None => {
                let mut all = self.metrics(idx);
                all.retain(|name, _| names.contains(&name.as_str()));
                all
            }
        }
    }
}

/// Regression targets are standardised with the training rows' mean and standard deviation.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct TargetScaling {
    pub mean: f64,
    pub std: f64,
}

impl TargetScaling {
    /// No scaling (classification heads, or a missing record).
    pub const IDENTITY: TargetScaling = TargetScaling { mean: 0.0, std: 1.0 };
}

/// What a task's network outputs and how its outputs become predictions. Stored as the loss it
/// trains with: `cross_entropy` for classifiers, `mse` or `huber` (with its delta) for regression.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
#[serde(into = "StoredHead", try_from = "StoredHead")]
pub struct Head {
    pub task: Task,
    pub classes: usize,
    /// Regression only; classifiers train with cross-entropy whatever this holds.
    pub loss: RegressionLoss,
    pub huber_delta: f64,
}

/// [`Head`] as stored: only the loss that applies.
#[derive(Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
struct StoredHead {
    task: Task,
    classes: usize,
    loss: String,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    huber_delta: Option<f64>,
}

impl From<Head> for StoredHead {
    fn from(h: Head) -> Self {
        let (loss, huber_delta) = match (h.task, h.loss) {
            (Task::Regression, RegressionLoss::Mse) => ("mse", None),
            (Task::Regression, RegressionLoss::Huber) => ("huber", Some(h.huber_delta)),
            _ => ("cross_entropy", None),
        };
        StoredHead { task: h.task, classes: h.classes, loss: loss.into(), huber_delta }
    }
}

impl TryFrom<StoredHead> for Head {
    type Error = String;
    fn try_from(s: StoredHead) -> std::result::Result<Self, String> {
        let loss = match (s.task, s.loss.as_str()) {
            // Folders of tabcard 0.3 recorded the unused regression loss, `mse`, for classifiers.
            (Task::Regression, "mse") | (Task::Binary | Task::Multiclass, "cross_entropy" | "mse") => RegressionLoss::Mse,
            (Task::Regression, "huber") => RegressionLoss::Huber,
            (task, other) => return Err(format!("loss `{other}` does not apply to a {} head", task.as_str())),
        };
        Ok(Head { task: s.task, classes: s.classes, loss, huber_delta: s.huber_delta.unwrap_or(1.0) })
    }
}

/// The stored name of the training objective's value on the final weights: cross-entropy from
/// the logits (unclipped, so it can differ from `log_loss`, which clips probabilities to
/// [eps, 1 - eps] with eps the f64 machine epsilon, as scikit-learn's does) or the regression loss on the
/// standardised target; no penalty terms.
pub const OBJECTIVE: &str = "objective";

fn softplus(x: f64) -> f64 {
    // log(1 + e^x) without overflow.
    if x > 0.0 {
        x + libm::log1p(libm::exp(-x))
    } else {
        libm::log1p(libm::exp(x))
    }
}

impl Head {
    pub fn outputs(&self) -> usize {
        match self.task {
            Task::Binary | Task::Regression => 1,
            Task::Multiclass => self.classes,
        }
    }

    /// Values per row of [`Head::predictions`]: class probabilities, or one prediction.
    pub fn values_per_row(&self) -> usize {
        match self.task {
            Task::Regression => 1,
            _ => self.classes,
        }
    }

    /// Mean loss of raw network outputs, computed on the host in f64 with `libm`.
    pub fn host_loss(&self, raw: &[f32], labels: &Labels, scaling: Option<TargetScaling>) -> f64 {
        let n = labels.len().max(1) as f64;
        match (self.task, labels) {
            (Task::Binary, Labels::Classes { rows, .. }) => {
                raw.iter()
                    .zip(rows)
                    .map(|(&z, &y)| {
                        let z = z as f64;
                        z.max(0.0) - z * y as f64 + softplus(-z.abs())
                    })
                    .sum::<f64>()
                    / n
            }
            (Task::Multiclass, Labels::Classes { rows, classes }) => {
                raw.chunks_exact(*classes)
                    .zip(rows)
                    .map(|(r, &y)| {
                        let max = r.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(v as f64));
                        let lse = max + libm::log(r.iter().map(|&v| libm::exp(v as f64 - max)).sum::<f64>());
                        lse - r[y] as f64
                    })
                    .sum::<f64>()
                    / n
            }
            (Task::Regression, Labels::Values(v)) => {
                let s = scaling.unwrap_or(TargetScaling::IDENTITY);
                raw.iter()
                    .zip(v)
                    .map(|(&p, &y)| {
                        let r = p as f64 - (y - s.mean) / s.std;
                        match self.loss {
                            RegressionLoss::Mse => r * r,
                            RegressionLoss::Huber => {
                                let a = r.abs();
                                if a <= self.huber_delta {
                                    0.5 * r * r
                                } else {
                                    self.huber_delta * (a - 0.5 * self.huber_delta)
                                }
                            }
                        }
                    })
                    .sum::<f64>()
                    / n
            }
            _ => f64::NAN,
        }
    }

    /// Probabilities (binary: `[1 - p, p]`; multiclass: softmax) or de-standardised predictions.
    pub fn predictions(&self, raw: &[f32], scaling: Option<TargetScaling>) -> Vec<f64> {
        match self.task {
            Task::Binary => raw
                .iter()
                .flat_map(|&z| {
                    let p = 1.0 / (1.0 + libm::exp(-(z as f64)));
                    [1.0 - p, p]
                })
                .collect(),
            Task::Multiclass => raw
                .chunks_exact(self.classes)
                .flat_map(|r| {
                    let max = r.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(v as f64));
                    let e: Vec<f64> = r.iter().map(|&v| libm::exp(v as f64 - max)).collect();
                    let sum: f64 = e.iter().sum();
                    e.into_iter().map(move |x| x / sum)
                })
                .collect(),
            Task::Regression => {
                let s = scaling.unwrap_or(TargetScaling::IDENTITY);
                raw.iter().map(|&p| p as f64 * s.std + s.mean).collect()
            }
        }
    }

    pub fn metrics(&self, outputs: &[f64], labels: &Labels) -> MetricSet {
        match labels {
            Labels::Classes { rows, classes } => registry::classification_metrics(rows, outputs, *classes),
            Labels::Values(v) => registry::regression_metrics(v, outputs),
        }
    }
}
