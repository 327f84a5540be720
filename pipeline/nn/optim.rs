//! Optimizers and learning-rate schedules. The choices are distinct and documented:
//! - `sgd`: v <- momentum v + g; w <- w - lr (g + momentum v) with Nesterov, else w - lr v;
//!   `weight_decay` multiplies weights by (1 - lr wd) before the step.
//! - `adam`: Kingma and Ba 2015, with bias correction; no decoupled decay.
//! - `adamw`: Adam plus decoupled weight decay w <- w (1 - lr wd) (Loshchilov and Hutter 2019).
//! - `l2_penalty` (any optimizer) is coupled: the trainer adds l2 / 2 ||W||^2 to the loss, so its
//!   gradient l2 W passes through the moment estimates.
//!
//! Decay and penalty apply to weight matrices only, never to biases or batch-norm parameters.

//!
//! The update runs on the host in f64, one fused pass per parameter (w, moments and gradient
//! element by element), then the rounded weights are written back: a few tens of candle
//! operations per step would otherwise cost more than the update itself. Only IEEE-exact
//! operations (+, *, /, sqrt) are used, so the update is the same on every platform.

use candle_core::{backprop::GradStore, DType, Tensor, Var};

use crate::error::Result;
use crate::manifest::{Optimizer as Kind, Schedule, TrainingSpec};

pub struct Optimizer {
    kind: Kind,
    spec: TrainingSpec,
    /// Per parameter: first moment (or SGD velocity) and second moment.
    first: Vec<Vec<f64>>,
    second: Vec<Vec<f64>>,
    steps: u64,
}

fn host_values(t: &Tensor) -> Result<Vec<f64>> {
    let flat = t.flatten_all()?;
    Ok(match t.dtype() {
        DType::F32 => flat.to_vec1::<f32>()?.into_iter().map(f64::from).collect(),
        _ => flat.to_dtype(DType::F64)?.to_vec1::<f64>()?,
    })
}

impl Optimizer {
    pub fn new(spec: &TrainingSpec, parameters: usize) -> Self {
        Optimizer { kind: spec.optimizer, spec: spec.clone(), first: vec![Vec::new(); parameters], second: vec![Vec::new(); parameters], steps: 0 }
    }

    /// One update of every parameter (in the same order as at construction) at rate `lr`, with
    /// gradients multiplied by `grad_scale` (clipping).
    pub fn step(&mut self, parameters: &[(String, &Var, bool)], grads: &GradStore, lr: f64, grad_scale: f64) -> Result<()> {
        self.steps += 1;
        let s = &self.spec;
        let t = self.steps as i32;
        let bias1 = 1.0 - s.beta1.powi(t);
        let bias2 = 1.0 - s.beta2.powi(t);
        for (i, (_, var, decays)) in parameters.iter().enumerate() {
            let Some(g) = grads.get(var.as_tensor()) else { continue };
            let g = host_values(g)?;
            let mut w = host_values(var.as_tensor())?;
            let decay = if *decays && s.weight_decay > 0.0 && self.kind != Kind::Adam { 1.0 - lr * s.weight_decay } else { 1.0 };
            let m = &mut self.first[i];
            let v = &mut self.second[i];
            match self.kind {
                Kind::Sgd => {
                    if s.momentum > 0.0 && m.is_empty() {
                        *m = vec![0.0; w.len()];
                    }
                    for j in 0..w.len() {
                        let gj = g[j] * grad_scale;
                        w[j] *= decay;
                        if s.momentum > 0.0 {
                            // PyTorch's convention: the first step's velocity is the gradient itself.
                            m[j] = if self.steps == 1 { gj } else { s.momentum * m[j] + gj };
                            let update = if s.nesterov { gj + s.momentum * m[j] } else { m[j] };
                            w[j] -= lr * update;
                        } else {
                            w[j] -= lr * gj;
                        }
                    }
                }
                Kind::Adam | Kind::Adamw => {
                    if m.is_empty() {
                        *m = vec![0.0; w.len()];
                        *v = vec![0.0; w.len()];
                    }
                    for j in 0..w.len() {
                        let gj = g[j] * grad_scale;
                        w[j] *= decay;
                        m[j] = s.beta1 * m[j] + (1.0 - s.beta1) * gj;
                        v[j] = s.beta2 * v[j] + (1.0 - s.beta2) * gj * gj;
                        w[j] -= lr * (m[j] / bias1) / ((v[j] / bias2).sqrt() + s.epsilon);
                    }
                }
            }
            let updated = match var.dtype() {
                DType::F32 => Tensor::from_vec(w.into_iter().map(|x| x as f32).collect::<Vec<f32>>(), var.dims(), &candle_core::Device::Cpu)?,
                dtype => Tensor::from_vec(w, var.dims(), &candle_core::Device::Cpu)?.to_dtype(dtype)?,
            };
            var.set(&updated)?;
        }
        Ok(())
    }
}

/// The learning rate at `step` (0-based) of `total` steps: linear warm-up over the first
/// `warmup_epochs`, then constant, step decay by `step_gamma` every `step_epochs`, or cosine
/// decay to zero. Uses the pure-Rust `libm`, so the rates are the same on every platform.
pub fn learning_rate(spec: &TrainingSpec, step: usize, steps_per_epoch: usize) -> f64 {
    let base = spec.learning_rate;
    let warmup = spec.warmup_epochs * steps_per_epoch;
    if step < warmup {
        return base * (step + 1) as f64 / warmup as f64;
    }
    let total = spec.epochs * steps_per_epoch;
    match spec.schedule {
        Schedule::Constant => base,
        Schedule::Step => base * libm::pow(spec.step_gamma, (step / (spec.step_epochs * steps_per_epoch).max(1)) as f64),
        Schedule::Cosine => {
            let progress = (step - warmup) as f64 / (total - warmup).max(1) as f64;
            base * 0.5 * (1.0 + libm::cos(std::f64::consts::PI * progress))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn schedules_follow_their_definitions() {
        let mut spec = TrainingSpec { learning_rate: 0.1, epochs: 10, warmup_epochs: 2, ..Default::default() };
        assert!((learning_rate(&spec, 0, 1) - 0.05).abs() < 1e-15);
        assert_eq!(learning_rate(&spec, 5, 1), 0.1);
        spec.schedule = Schedule::Cosine;
        assert_eq!(learning_rate(&spec, 2, 1), 0.1);
        assert!((learning_rate(&spec, 6, 1) - 0.05).abs() < 1e-12);
        spec.schedule = Schedule::Step;
        spec.warmup_epochs = 0;
        spec.step_epochs = 3;
        assert!((learning_rate(&spec, 7, 1) - 0.1 * 0.25).abs() < 1e-15);
    }
}
