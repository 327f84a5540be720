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
