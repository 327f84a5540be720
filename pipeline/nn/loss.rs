//! Losses, each the mean over the batch: binary cross-entropy on logits in its stable form,
//! softmax cross-entropy, mean squared error and Huber.

use candle_core::Tensor;

use crate::error::Result;

/// max(z, 0) - z y + log(1 + exp(-|z|)): equal to -[y log s(z) + (1-y) log(1 - s(z))] but finite
/// for every z. `logits` and `targets` are (n, 1), targets 0 or 1.
pub fn binary_cross_entropy(logits: &Tensor, targets: &Tensor) -> Result<Tensor> {
    let softplus_neg_abs = (logits.abs()?.neg()?.exp()? + 1.0)?.log()?;
    let per_row = ((logits.relu()? - logits.mul(targets)?)? + softplus_neg_abs)?;
    Ok(per_row.mean_all()?)
}

/// Softmax cross-entropy: `logits` (n, k), `classes` (n,) of u32 class indices.
pub fn softmax_cross_entropy(logits: &Tensor, classes: &Tensor) -> Result<Tensor> {
    let log_probs = candle_nn::ops::log_softmax(logits, 1)?;
    let picked = log_probs.gather(&classes.unsqueeze(1)?, 1)?;
    Ok(picked.neg()?.mean_all()?)
}

pub fn mean_squared_error(predicted: &Tensor, targets: &Tensor) -> Result<Tensor> {
    Ok(predicted.sub(targets)?.sqr()?.mean_all()?)
}

/// Huber: 0.5 r^2 where |r| <= delta, delta (|r| - 0.5 delta) beyond; written as
/// 0.5 q^2 + delta (|r| - q) with q = min(|r|, delta).
pub fn huber(predicted: &Tensor, targets: &Tensor, delta: f64) -> Result<Tensor> {
    let abs = predicted.sub(targets)?.abs()?;
    let q = abs.clamp(0.0, delta)?;
    let loss = ((q.sqr()? * 0.5)? + (abs.sub(&q)? * delta)?)?;
    Ok(loss.mean_all()?)
}

/// The training objective on the host, for the engine: mean loss over the batch in f64 (with
/// `libm`) and its gradient with respect to the logits.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Objective {
    /// Targets 0 or 1; one logit per row.
    BinaryCrossEntropy,
    /// Targets are class indices; `classes` logits per row.
    SoftmaxCrossEntropy {
        classes: usize,
    },
    MeanSquaredError,
    Huber {
        delta: f64,
    },
}

/// Mean loss of `logits` (rows x outputs) against `targets` (one per row), writing d loss / d
/// logit into `grad`. The same definitions as the candle losses above, computed in f64.
pub fn objective_and_gradient<T: crate::nn::scalar::Real>(objective: Objective, logits: &[T], targets: &[f64], grad: &mut [T]) -> f64 {
    let n = targets.len().max(1) as f64;
    let mut total = 0.0;
    match objective {
        Objective::BinaryCrossEntropy => {
            for ((&z, &y), g) in logits.iter().zip(targets).zip(grad.iter_mut()) {
                let z = z.widen();
                total += z.max(0.0) - z * y + libm::log1p(libm::exp(-z.abs()));
                let p = if z >= 0.0 {
                    1.0 / (1.0 + libm::exp(-z))
                } else {
                    let e = libm::exp(z);
                    e / (1.0 + e)
                };
                *g = T::narrow((p - y) / n);
            }
        }
        Objective::SoftmaxCrossEntropy { classes } => {
            for ((row, &y), grow) in logits.chunks_exact(classes).zip(targets).zip(grad.chunks_exact_mut(classes)) {
                let max = row.iter().fold(f64::NEG_INFINITY, |m, v| m.max(v.widen()));
                let sum: f64 = row.iter().map(|v| libm::exp(v.widen() - max)).sum();
                let lse = max + libm::log(sum);
                let label = y as usize;
                total += lse - row[label].widen();
                for (k, (g, v)) in grow.iter_mut().zip(row).enumerate() {
                    let p = libm::exp(v.widen() - lse);
                    *g = T::narrow((p - if k == label { 1.0 } else { 0.0 }) / n);
                }
            }
        }
        Objective::MeanSquaredError => {
            for ((&z, &y), g) in logits.iter().zip(targets).zip(grad.iter_mut()) {
                let r = z.widen() - y;
                total += r * r;
                *g = T::narrow(2.0 * r / n);
            }
        }
        Objective::Huber { delta } => {
            for ((&z, &y), g) in logits.iter().zip(targets).zip(grad.iter_mut()) {
                let r = z.widen() - y;
                let a = r.abs();
                let q = a.min(delta);
                total += 0.5 * q * q + delta * (a - q);
                *g = T::narrow(r.clamp(-delta, delta) / n);
            }
        }
    }
    total / n
}
