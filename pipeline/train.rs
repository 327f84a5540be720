//! One seeded run, a pure function: (configuration, seed, matrices) -> [`RunResult`]. Mini-batch
//! training with the configured optimizer, schedule, clipping and regularizers; early stopping on
//! validation loss that restores the best epoch's weights; divergence detection. Every random draw
//! comes from a stream derived from (seed, purpose); the arithmetic is single-threaded.

use candle_core::DType;
use serde::{Deserialize, Serialize};

use crate::data::prep::Matrix;
use crate::error::{Error, Result};
use crate::manifest::{RegressionLoss, Task};
use crate::metrics::{classification, regression, MetricSet};
use crate::nn::engine::{Engine, Values};
use crate::nn::loss::{objective_and_gradient, Objective};
use crate::nn::mlp::{Mlp, NamedTensor};
use crate::nn::optim::{learning_rate, Optimizer};
use crate::nn::scalar::Real;
use crate::plan::RunConfig;
use crate::rng::{Purpose, Stream};

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

/// The matrices one run trains and validates on.
pub struct RunData<'a> {
    pub train_x: &'a Matrix,
    pub train_y: &'a Labels,
    pub validation_x: &'a Matrix,
    pub validation_y: &'a Labels,
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

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpochRecord {
    pub epoch: usize,
    /// Mean training loss over the epoch's batches (with dropout and noise active).
    pub train_loss: f64,
    /// Validation loss in evaluation mode.
    pub validation_loss: f64,
    /// The selection metric on the validation rows.
    pub validation_metric: Option<f64>,
    pub learning_rate: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "status", rename_all = "snake_case")]
pub enum Outcome {
    Completed,
    Diverged {
        epoch: usize,
        detail: String,
    },
    /// The engine failed (an error, not a numerical divergence).
    Failed {
        detail: String,
    },
}

impl Outcome {
    pub fn is_completed(&self) -> bool {
        matches!(self, Outcome::Completed)
    }

    pub fn describe(&self) -> String {
        match self {
            Outcome::Completed => "completed".into(),
            Outcome::Diverged { epoch, detail } => format!("diverged in epoch {epoch}: {detail}"),
            Outcome::Failed { detail } => format!("failed: {detail}"),
        }
    }
}

pub struct RunResult {
    pub outcome: Outcome,
    pub tensors: Vec<NamedTensor>,
    pub history: Vec<EpochRecord>,
    /// Epoch (1-based) whose weights were kept.
    pub best_epoch: usize,
    pub stopped_early: bool,
    pub parameter_count: usize,
    pub target_scaling: Option<TargetScaling>,
    pub train_metrics: MetricSet,
    pub validation_metrics: MetricSet,
    /// Per validation row: class probabilities (row-major, k per row) or the prediction.
    pub validation_outputs: Vec<f64>,
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
            Labels::Classes { rows, classes } => classification::scalar_metrics(rows, outputs, *classes),
            Labels::Values(v) => regression::scalar_metrics(v, outputs),
        }
    }
}

/// The selection metric of validation outputs, for the history.
fn metric_of(head: &Head, outputs: &[f64], labels: &Labels, name: &str) -> Option<f64> {
    head.metrics(outputs, labels).get(name).copied().flatten()
}

/// Trains one run. `selection_metric` is recorded per epoch; early stopping watches the loss.
pub fn train(head: Head, config: &RunConfig, seed: u64, data: &RunData<'_>, selection_metric: &str) -> Result<RunResult> {
    train_with_dtype(head, config, seed, data, selection_metric, DType::F32)
}

/// As [`train`], in a chosen precision (f64 serves gradient and convergence tests).
pub fn train_with_dtype(
    head: Head,
    config: &RunConfig,
    seed: u64,
    data: &RunData<'_>,
    selection_metric: &str,
    dtype: DType,
) -> Result<RunResult> {
    match dtype {
        DType::F32 => train_in::<f32>(head, config, seed, data, selection_metric),
        DType::F64 => train_in::<f64>(head, config, seed, data, selection_metric),
        other => Err(Error::Engine(format!("training in {other:?} is not supported (f32 or f64)"))),
    }
}

/// The objective the engine minimises for this head.
fn objective(head: &Head, training: &crate::manifest::TrainingSpec) -> Objective {
    match head.task {
        Task::Binary => Objective::BinaryCrossEntropy,
        Task::Multiclass => Objective::SoftmaxCrossEntropy { classes: head.classes },
        Task::Regression => match training.loss {
            RegressionLoss::Mse => Objective::MeanSquaredError,
            RegressionLoss::Huber => Objective::Huber { delta: training.huber_delta },
        },
    }
}

/// Each row's training target as the objective reads it: 0/1, a class index, or the
/// standardised value.
fn row_targets(labels: &Labels, scaling: Option<TargetScaling>) -> Vec<f64> {
    match labels {
        Labels::Classes { rows, .. } => rows.iter().map(|&c| c as f64).collect(),
        Labels::Values(v) => {
            let s = scaling.unwrap_or(TargetScaling::IDENTITY);
            v.iter().map(|&y| (y - s.mean) / s.std).collect()
        }
    }
}

fn train_in<T: Real>(head: Head, config: &RunConfig, seed: u64, data: &RunData<'_>, selection_metric: &str) -> Result<RunResult> {
    crate::numerics::prepare_process();
    let t = &config.training;
    let n = data.train_x.rows;
    if n == 0 || data.validation_x.rows == 0 {
        return Err(Error::Engine("a run needs training and validation rows".into()));
    }
    let scaling = match data.train_y {
        Labels::Values(v) => {
            let mean = v.iter().sum::<f64>() / v.len() as f64;
            let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / v.len() as f64;
            Some(TargetScaling { mean, std: if var > 0.0 { var.sqrt() } else { 1.0 } })
        }
        Labels::Classes { .. } => None,
    };
    let mut init = Stream::new(seed, Purpose::Init);
    let mut shuffle = Stream::new(seed, Purpose::Shuffle);
    let mut dropout_stream = Stream::new(seed, Purpose::Dropout);
    let mut noise_stream = Stream::new(seed, Purpose::InputNoise);
    let mut model = Mlp::new(&config.model, data.train_x.cols, head.outputs(), &mut init, T::DTYPE)?;
    let parameter_count = model.parameter_count();

    let batch = t.batch_size.min(n);
    let mut engine = Engine::<T>::from_model(&model, batch)?;
    let mut optimizer = Optimizer::new(t, engine.slot_count());
    let objective = objective(&head, t);
    let targets = row_targets(data.train_y, scaling);
    let mut batch_targets = Vec::with_capacity(batch);
    let steps_per_epoch = n.div_ceil(batch);
    let mut order: Vec<usize> = (0..n).collect();
    let mut history = Vec::with_capacity(t.epochs);
    // (validation loss, epoch, values) of the best epoch so far.
    let mut best: Option<(f64, usize, Values<T>)> = None;
    let mut since_best = 0usize;
    let mut stopped_early = false;
    let mut step = 0usize;
    let mut outcome = Outcome::Completed;

    'epochs: for epoch in 1..=t.epochs {
        shuffle.shuffle(&mut order);
        let mut loss_sum = 0.0;
        let mut loss_batches = 0usize;
        let mut lr = t.learning_rate;
        for chunk in order.chunks(batch) {
            // A batch of one row has no batch statistics; it is skipped when batch norm is on.
            if config.model.batch_norm && chunk.len() < 2 {
                continue;
            }
            lr = learning_rate(t, step, steps_per_epoch);
            step += 1;
            engine.forward(data.train_x, chunk, &mut dropout_stream, &mut noise_stream);
            batch_targets.clear();
            batch_targets.extend(chunk.iter().map(|&r| targets[r]));
            let (logits, grad) = engine.logits_and_gradient();
            let data_loss = objective_and_gradient(objective, logits, &batch_targets, grad);
            if !data_loss.is_finite() {
                outcome = Outcome::Diverged { epoch, detail: format!("training loss became {data_loss} at step {step}") };
                break 'epochs;
            }
            loss_sum += data_loss;
            loss_batches += 1;
            engine.backward(t.l2_penalty);
            let mut grad_scale = 1.0;
            if t.clip_norm > 0.0 {
                let norm = engine.gradient_norm();
                if !norm.is_finite() {
                    outcome = Outcome::Diverged { epoch, detail: format!("gradient norm became {norm} at step {step}") };
                    break 'epochs;
                }
                if norm > t.clip_norm {
                    grad_scale = t.clip_norm / norm;
                }
            }
            let update = optimizer.begin_step(lr, grad_scale);
            engine.update(&mut optimizer, &update);
        }
        let raw_val = engine.evaluate(data.validation_x);
        let validation_loss = head.host_loss(&raw_val, data.validation_y, scaling);
        if !validation_loss.is_finite() {
            outcome = Outcome::Diverged { epoch, detail: format!("validation loss became {validation_loss}") };
            break;
        }
        let outputs = head.predictions(&raw_val, scaling);
        history.push(EpochRecord {
            epoch,
            train_loss: loss_sum / loss_batches.max(1) as f64,
            validation_loss,
            validation_metric: metric_of(&head, &outputs, data.validation_y, selection_metric),
            learning_rate: lr,
        });
        let es = &t.early_stopping;
        let improved = best.as_ref().is_none_or(|(b, _, _)| validation_loss < b - es.min_delta);
        if improved {
            best = Some((validation_loss, epoch, if es.enabled { engine.values() } else { Vec::new() }));
            since_best = 0;
        } else {
            since_best += 1;
            if es.enabled && since_best >= es.patience {
                stopped_early = true;
                break;
            }
        }
    }

    if let Outcome::Diverged { .. } = outcome {
        return Ok(RunResult {
            outcome,
            tensors: Vec::new(),
            history,
            best_epoch: 0,
            stopped_early: false,
            parameter_count,
            target_scaling: scaling,
            train_metrics: MetricSet::new(),
            validation_metrics: MetricSet::new(),
            validation_outputs: Vec::new(),
        });
    }
    let best_epoch = match (&best, t.early_stopping.enabled) {
        (Some((_, e, values)), true) => {
            engine.load_values(values)?;
            *e
        }
        _ => history.len(),
    };
    model.set_host_values(&engine.values())?;
    let raw_train = engine.evaluate(data.train_x);
    let raw_val = engine.evaluate(data.validation_x);
    let train_outputs = head.predictions(&raw_train, scaling);
    let validation_outputs = head.predictions(&raw_val, scaling);
    let mut train_metrics = head.metrics(&train_outputs, data.train_y);
    train_metrics.insert(OBJECTIVE.into(), Some(head.host_loss(&raw_train, data.train_y, scaling)));
    let mut validation_metrics = head.metrics(&validation_outputs, data.validation_y);
    validation_metrics.insert(OBJECTIVE.into(), Some(head.host_loss(&raw_val, data.validation_y, scaling)));
    Ok(RunResult {
        outcome,
        tensors: model.named_tensors()?,
        history,
        best_epoch,
        stopped_early,
        parameter_count,
        target_scaling: scaling,
        train_metrics,
        validation_metrics,
        validation_outputs,
    })
}
