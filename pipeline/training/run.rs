//! One seeded run, a pure function: (configuration, seed, matrices) -> [`RunResult`]. Mini-batch
//! training with the configured optimizer, schedule, clipping and regularizers; early stopping on
//! validation loss that restores the best epoch's weights; divergence detection. Every random draw
//! comes from a stream derived from (seed, purpose); the arithmetic is split across the threads of
//! the run's pool only where the split changes no bit (`nn/spread.rs`).

use candle_core::DType;

use super::config::RunConfig;
use super::head::{Head, Labels, TargetScaling, OBJECTIVE};
use super::record::{EpochRecord, Outcome, RunResult};
use crate::data::prep::Matrix;
use crate::error::{Error, Result};
use crate::manifest::{RegressionLoss, Task};
use crate::metrics::MetricSet;
use crate::nn::engine::{Engine, Values};
use crate::nn::loss::{objective_and_gradient, Objective};
use crate::nn::mlp::Mlp;
use crate::nn::optim::{learning_rate, Optimizer};
use crate::nn::scalar::Real;
use crate::rng::{Purpose, Stream};

/// The matrices one run trains and validates on.
pub struct RunData<'a> {
    pub train_x: &'a Matrix,
    pub train_y: &'a Labels,
    pub validation_x: &'a Matrix,
    pub validation_y: &'a Labels,
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
    let mut engine = Engine::<T>::spread_over(&model, batch, crate::nn::spread::threads_here())?;
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
            threads_taken: engine.threads_taken(),
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
    // The training rows' raw outputs give the loss and the predictions and are dropped before
    // the metrics, which hold their own per-row vectors (over millions of rows this pass sets
    // the run's peak memory).
    let (train_loss, train_outputs) = {
        let raw_train = engine.evaluate(data.train_x);
        (head.host_loss(&raw_train, data.train_y, scaling), head.predictions(&raw_train, scaling))
    };
    let raw_val = engine.evaluate(data.validation_x);
    let validation_outputs = head.predictions(&raw_val, scaling);
    let mut train_metrics = head.metrics(&train_outputs, data.train_y);
    drop(train_outputs);
    train_metrics.insert(OBJECTIVE.into(), Some(train_loss));
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
        threads_taken: engine.threads_taken(),
    })
}
