//! Optimizers and learning-rate schedules. The choices are distinct and documented:
//! - `sgd`: v <- momentum v + g; w <- w - lr (g + momentum v) with Nesterov, else w - lr v;
//!   `weight_decay` multiplies weights by (1 - lr wd) before the step.
//! - `adam`: Kingma and Ba 2015, with bias correction; no decoupled decay.
//! - `adamw`: Adam plus decoupled weight decay w <- w (1 - lr wd) (Loshchilov and Hutter 2019).
//! - `l2_penalty` (any optimizer) is coupled: the trainer adds l2 / 2 ||W||^2 to the loss, so its
//!   gradient l2 W passes through the moment estimates.
//!
//! Decay and penalty apply to weight matrices only, never to biases or batch-norm parameters.

use candle_core::{backprop::GradStore, Tensor, Var};

use crate::error::Result;
use crate::manifest::{Optimizer as Kind, Schedule, TrainingSpec};

struct Slot {
    first: Option<Tensor>,
    second: Option<Tensor>,
}

pub struct Optimizer {
    kind: Kind,
    spec: TrainingSpec,
    slots: Vec<Slot>,
    steps: u64,
}

impl Optimizer {
    pub fn new(spec: &TrainingSpec, parameters: usize) -> Self {
        Optimizer {
            kind: spec.optimizer,
            spec: spec.clone(),
            slots: (0..parameters).map(|_| Slot { first: None, second: None }).collect(),
            steps: 0,
        }
    }

    /// One update of every parameter (in the same order as at construction) at rate `lr`.
    pub fn step(&mut self, parameters: &[(String, &Var, bool)], grads: &GradStore, lr: f64, grad_scale: f64) -> Result<()> {
        self.steps += 1;
        let t = self.steps as i32;
        let s = &self.spec;
        for ((_, var, decays), slot) in parameters.iter().zip(&mut self.slots) {
            let Some(g) = grads.get(var.as_tensor()) else { continue };
            let g = if grad_scale != 1.0 { (g * grad_scale)? } else { g.clone() };
            let mut w = var.as_tensor().clone();
            if *decays && s.weight_decay > 0.0 && self.kind != Kind::Adam {
                w = (w * (1.0 - lr * s.weight_decay))?;
            }
            let w = match self.kind {
                Kind::Sgd => {
                    if s.momentum > 0.0 {
                        let v = match &slot.first {
                            Some(v) => ((v * s.momentum)? + &g)?,
                            None => g.clone(),
                        };
                        let update = if s.nesterov { (&g + (&v * s.momentum)?)? } else { v.clone() };
                        slot.first = Some(v);
                        (w - (update * lr)?)?
                    } else {
                        (w - (g * lr)?)?
                    }
                }
                Kind::Adam | Kind::Adamw => {
                    let m = match &slot.first {
                        Some(m) => ((m * s.beta1)? + (&g * (1.0 - s.beta1))?)?,
                        None => (&g * (1.0 - s.beta1))?,
                    };
                    let v = match &slot.second {
                        Some(v) => ((v * s.beta2)? + (g.sqr()? * (1.0 - s.beta2))?)?,
                        None => (g.sqr()? * (1.0 - s.beta2))?,
                    };
                    let m_hat_scale = 1.0 / (1.0 - s.beta1.powi(t));
                    let v_hat_scale = 1.0 / (1.0 - s.beta2.powi(t));
                    let denom = ((&v * v_hat_scale)?.sqrt()? + s.epsilon)?;
                    let update = (&m * (lr * m_hat_scale))?.div(&denom)?;
                    slot.first = Some(m);
                    slot.second = Some(v);
                    (w - update)?
                }
            };
            var.set(&w)?;
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
