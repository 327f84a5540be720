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
//! The update runs in f64, one fused pass per parameter (weight, moments and gradient element
//! by element), rounding the weight back to its precision. Only IEEE-exact operations
//! (+, *, /, sqrt) are used, so the update is the same on every platform.

use rayon::prelude::*;

use super::scalar::Real;
use super::spread::Spread;
use crate::manifest::{Optimizer as Kind, Schedule, TrainingSpec};

pub struct Optimizer {
    kind: Kind,
    spec: TrainingSpec,
    /// Per parameter slot: first moment (or SGD velocity) and second moment.
    first: Vec<Vec<f64>>,
    second: Vec<Vec<f64>>,
    steps: u64,
}

/// The constants of one update step, shared by every parameter.
#[derive(Debug, Clone, Copy)]
pub struct Step {
    lr: f64,
    grad_scale: f64,
    bias1: f64,
    bias2: f64,
    first: bool,
}

impl Optimizer {
    /// An optimizer for `slots` parameter tensors, addressed by slot index in [`Optimizer::update`].
    pub fn new(spec: &TrainingSpec, slots: usize) -> Self {
        Optimizer { kind: spec.optimizer, spec: spec.clone(), first: vec![Vec::new(); slots], second: vec![Vec::new(); slots], steps: 0 }
    }

    /// Counts a new step at rate `lr`, with gradients multiplied by `grad_scale` (clipping).
    pub fn begin_step(&mut self, lr: f64, grad_scale: f64) -> Step {
        self.steps += 1;
        let t = self.steps as i32;
        Step { lr, grad_scale, bias1: 1.0 - self.spec.beta1.powi(t), bias2: 1.0 - self.spec.beta2.powi(t), first: self.steps == 1 }
    }

    /// Updates the parameter in `slot` in place from its gradient; `decays` says whether weight
    /// decay applies to it. Every element's update is independent of the others, so stretches of
    /// a large parameter go to the threads of `spread` with the same bits.
    pub fn update<T: Real>(&mut self, spread: &Spread, step: &Step, slot: usize, w: &mut [T], g: &[T], decays: bool) {
        let s = &self.spec;
        let decay = if decays && s.weight_decay > 0.0 && self.kind != Kind::Adam { 1.0 - step.lr * s.weight_decay } else { 1.0 };
        let (m, v) = (&mut self.first[slot], &mut self.second[slot]);
        let stretch = spread.band(w.len(), STRETCH_ALIGN, 8);
        let split = stretch < w.len();
        let gradient = |i: usize, len: usize| &g[i * stretch..i * stretch + len];
        match self.kind {
            Kind::Sgd => {
                let sgd = Sgd { momentum: s.momentum, nesterov: s.nesterov, first: step.first, lr: step.lr, scale: step.grad_scale, decay };
                if s.momentum > 0.0 {
                    if m.is_empty() {
                        *m = vec![0.0; w.len()];
                    }
                    if split {
                        spread.each(w.par_chunks_mut(stretch).zip(m.par_chunks_mut(stretch)).enumerate(), |(i, (w, m))| {
                            sgd.momentum_step(w, gradient(i, w.len()), m);
                        });
                    } else {
                        sgd.momentum_step(w, g, m);
                    }
                } else if split {
                    spread.each(w.par_chunks_mut(stretch).enumerate(), |(i, w)| {
                        sgd.plain_step(w, gradient(i, w.len()));
                    });
                } else {
                    sgd.plain_step(w, g);
                }
            }
            Kind::Adam | Kind::Adamw => {
                if m.is_empty() {
                    *m = vec![0.0; w.len()];
                    *v = vec![0.0; w.len()];
                }
                let k = AdamConstants {
                    b1: s.beta1,
                    b2: s.beta2,
                    eps: s.epsilon,
                    step_size: step.lr / step.bias1,
                    inv_sqrt_c2: 1.0 / step.bias2.sqrt(),
                    scale: step.grad_scale,
                    decay,
                };
                if split {
                    spread.each(
                        w.par_chunks_mut(stretch).zip(m.par_chunks_mut(stretch).zip(v.par_chunks_mut(stretch))).enumerate(),
                        |(i, (w, (m, v)))| {
                            adam(w, gradient(i, w.len()), m, v, &k);
                        },
                    );
                } else {
                    adam(w, g, m, v, &k);
                }
            }
        }
    }
}

/// Elements per stretch of a split update are a multiple of this (a cache line of f64).
const STRETCH_ALIGN: usize = 64;

/// SGD's per-step constants.
struct Sgd {
    momentum: f64,
    nesterov: bool,
    /// The first step, whose velocity is the gradient itself (PyTorch's convention).
    first: bool,
    lr: f64,
    scale: f64,
    decay: f64,
}

impl Sgd {
    fn momentum_step<T: Real>(&self, w: &mut [T], g: &[T], m: &mut [f64]) {
        for ((wj, &gj), mj) in w.iter_mut().zip(g).zip(m.iter_mut()) {
            let gj = gj.widen() * self.scale;
            *mj = if self.first { gj } else { self.momentum * *mj + gj };
            let update = if self.nesterov { gj + self.momentum * *mj } else { *mj };
            *wj = T::narrow(wj.widen() * self.decay - self.lr * update);
        }
    }

    fn plain_step<T: Real>(&self, w: &mut [T], g: &[T]) {
        for (wj, &gj) in w.iter_mut().zip(g) {
            *wj = T::narrow(wj.widen() * self.decay - self.lr * (gj.widen() * self.scale));
        }
    }
}

/// Adam's per-step constants, folded as PyTorch folds them: lr / (1 - beta1^t) and
/// 1 / sqrt(1 - beta2^t), so each element costs one square root and one division.
struct AdamConstants {
    b1: f64,
    b2: f64,
    eps: f64,
    step_size: f64,
    inv_sqrt_c2: f64,
    scale: f64,
    decay: f64,
}

#[inline(always)]
fn adam_body<T: Real>(w: &mut [T], g: &[T], m: &mut [f64], v: &mut [f64], k: &AdamConstants) {
    for ((wj, &gj), (mj, vj)) in w.iter_mut().zip(g).zip(m.iter_mut().zip(v.iter_mut())) {
        let gj = gj.widen() * k.scale;
        *mj = k.b1 * *mj + (1.0 - k.b1) * gj;
        *vj = k.b2 * *vj + (1.0 - k.b2) * gj * gj;
        *wj = T::narrow(wj.widen() * k.decay - k.step_size * *mj / (vj.sqrt() * k.inv_sqrt_c2 + k.eps));
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx512f")]
fn adam_avx512<T: Real>(w: &mut [T], g: &[T], m: &mut [f64], v: &mut [f64], k: &AdamConstants) {
    adam_body(w, g, m, v, k)
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn adam_avx2<T: Real>(w: &mut [T], g: &[T], m: &mut [f64], v: &mut [f64], k: &AdamConstants) {
    adam_body(w, g, m, v, k)
}

/// The Adam update, compiled for the widest vector unit the CPU has. Every operation is an
/// IEEE-754 correctly rounded +, *, / or sqrt on one element (Rust never contracts a * b + c into
/// a fused multiply-add), so every vector width gives the same bits.
fn adam<T: Real>(w: &mut [T], g: &[T], m: &mut [f64], v: &mut [f64], k: &AdamConstants) {
    #[cfg(target_arch = "x86_64")]
    {
        if std::is_x86_feature_detected!("avx512f") {
            // SAFETY: the CPU has AVX-512F, checked on the line above.
            return unsafe { adam_avx512(w, g, m, v, k) };
        }
        if std::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU has AVX2, checked on the line above.
            return unsafe { adam_avx2(w, g, m, v, k) };
        }
    }
    adam_body(w, g, m, v, k)
}

/// The learning rate at `step` (0-based) of `total` steps: linear warm-up over the first
/// `warmup_epochs`, then constant, step decay by `step_gamma` every `step_epochs`, or cosine
/// decay to zero. Uses the pure-Rust `libm`, so the rates are the same on every platform.
pub(crate) fn learning_rate(spec: &TrainingSpec, step: usize, steps_per_epoch: usize) -> f64 {
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
