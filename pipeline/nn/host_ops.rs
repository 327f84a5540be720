//! The engine's element-wise host operations on a rows x cols batch: batch normalisation
//! forward (batch statistics, updating the running ones) and backward, activations and their
//! derivatives. Every sum runs in a fixed row order, so results do not depend on the machine.

use rayon::prelude::*;

use super::layers::{BN_EPS, BN_MOMENTUM};
use super::scalar::Real;
use super::spread::Spread;
use crate::manifest::Activation;

/// Elements per stretch of an element-wise pass are a multiple of this (a cache line of f64).
const STRETCH_ALIGN: usize = 64;

/// Rough cost of one element of an activation or its derivative, in multiply-adds: what decides
/// whether a pass is worth splitting (speed only).
fn cost(activation: Activation) -> usize {
    match activation {
        Activation::Relu | Activation::Identity => 2,
        Activation::Sigmoid | Activation::Tanh | Activation::Gelu => 24,
    }
}

/// `values[start..start + len]`, or nothing when `values` is empty (an operand the
/// pass does not use).
fn part<T>(values: &[T], start: usize, len: usize) -> &[T] {
    if values.is_empty() {
        values
    } else {
        &values[start..start + len]
    }
}

/// Batch normalisation's parameters, running statistics and per-batch state.
#[derive(Clone)]
pub(super) struct Norm<T> {
    pub(super) gamma: Vec<T>,
    pub(super) beta: Vec<T>,
    pub(super) running_mean: Vec<T>,
    pub(super) running_var: Vec<T>,
    pub(super) grad_gamma: Vec<T>,
    pub(super) grad_beta: Vec<T>,
    /// (x - mean) / sqrt(var + eps) of the last batch, rows x width.
    pub(super) normalised: Vec<T>,
    pub(super) mean: Vec<T>,
    pub(super) inv_std: Vec<T>,
}

/// Sums of each column of a rows x `cols` matrix, row by row.
pub(super) fn column_sums<T: Real>(m: &[T], cols: usize, out: &mut [T]) {
    out.fill(T::zero());
    for row in m.chunks_exact(cols) {
        for (s, &v) in out.iter_mut().zip(row) {
            *s += v;
        }
    }
}

/// Batch statistics of `z` (rows x cols) in place: z <- gamma (z - mean) / sqrt(var + eps) + beta
/// with the biased batch variance; running statistics move by the momentum, with the unbiased
/// variance (as PyTorch keeps them).
pub(super) fn normalise<T: Real>(norm: &mut Norm<T>, z: &mut [T], rows: usize, cols: usize) {
    let n = T::narrow(rows as f64);
    let mean = &mut norm.mean;
    column_sums(z, cols, mean);
    for m in mean.iter_mut() {
        *m /= n;
    }
    let var = &mut norm.inv_std;
    var.fill(T::zero());
    for row in z.chunks_exact(cols) {
        for ((v, &x), &m) in var.iter_mut().zip(row).zip(mean.iter()) {
            let c = x - m;
            *v += c * c;
        }
    }
    let (keep, take_new) = (T::narrow(1.0 - BN_MOMENTUM), T::narrow(BN_MOMENTUM));
    let unbias = if rows > 1 { T::narrow(rows as f64 / (rows as f64 - 1.0)) } else { T::one() };
    let eps = T::narrow(BN_EPS);
    for j in 0..cols {
        let biased = var[j] / n;
        norm.running_mean[j] = norm.running_mean[j] * keep + mean[j] * take_new;
        norm.running_var[j] = norm.running_var[j] * keep + biased * unbias * take_new;
        var[j] = T::one() / (biased + eps).sqrt();
    }
    for (zrow, nrow) in z.chunks_exact_mut(cols).zip(norm.normalised.chunks_exact_mut(cols)) {
        for j in 0..cols {
            let x = (zrow[j] - mean[j]) * var[j];
            nrow[j] = x;
            zrow[j] = norm.gamma[j] * x + norm.beta[j];
        }
    }
}

/// From the gradient of batch norm's output (in `g`, rows x cols) to that of its input, in
/// place: dz = gamma inv_std / n (n dy - sum dy - xhat sum(dy xhat)); also d gamma and d beta.
pub(super) fn normalise_backward<T: Real>(norm: &mut Norm<T>, g: &mut [T], rows: usize, cols: usize) {
    column_sums(g, cols, &mut norm.grad_beta);
    norm.grad_gamma.fill(T::zero());
    for (grow, nrow) in g.chunks_exact(cols).zip(norm.normalised.chunks_exact(cols)) {
        for ((s, &dy), &x) in norm.grad_gamma.iter_mut().zip(grow).zip(nrow) {
            *s += dy * x;
        }
    }
    let n = T::narrow(rows as f64);
    for (grow, nrow) in g.chunks_exact_mut(cols).zip(norm.normalised.chunks_exact(cols)) {
        for j in 0..cols {
            let factor = norm.gamma[j] * norm.inv_std[j] / n;
            grow[j] = factor * (n * grow[j] - norm.grad_beta[j] - nrow[j] * norm.grad_gamma[j]);
        }
    }
}

const FRAC_1_SQRT_2PI: f64 = 0.398_942_280_401_432_7;

/// [`activate`] in stretches of `out` across the threads of `spread`: the same bits.
pub(super) fn activate_spread<T: Real>(spread: &Spread, activation: Activation, pre: &[T], act: &mut [T], out: &mut [T]) {
    let stretch = spread.band(out.len(), STRETCH_ALIGN, cost(activation));
    if stretch >= out.len() {
        return activate(activation, pre, act, out);
    }
    spread.each(out.par_chunks_mut(stretch).enumerate(), |(i, o)| {
        activate(activation, &pre[i * stretch..i * stretch + o.len()], &mut [], o);
    });
    if !act.is_empty() {
        act[..out.len()].copy_from_slice(out);
    }
}

/// `out = f(pre)`; `act` keeps f(pre) too when it is non-empty (sigmoid, tanh).
pub(super) fn activate<T: Real>(activation: Activation, pre: &[T], act: &mut [T], out: &mut [T]) {
    let half = T::narrow(0.5);
    let inv_sqrt2 = T::narrow(std::f64::consts::FRAC_1_SQRT_2);
    let f = |x: T| -> T {
        match activation {
            Activation::Relu => {
                if x > T::zero() {
                    x
                } else {
                    T::zero()
                }
            }
            Activation::Sigmoid => T::one() / (T::one() + (-x).exp()),
            Activation::Tanh => x.tanh(),
            Activation::Gelu => half * x * (T::one() + (x * inv_sqrt2).erf()),
            Activation::Identity => x,
        }
    };
    for (o, &x) in out.iter_mut().zip(pre.iter()) {
        *o = f(x);
    }
    if !act.is_empty() {
        act[..out.len()].copy_from_slice(out);
    }
}

/// [`derivative`] in stretches of `pre` across the threads of `spread`: the same bits.
pub(super) fn derivative_spread<T: Real>(
    spread: &Spread,
    activation: Activation,
    pre: &mut [T],
    act: &[T],
    grad_out: &[T],
    mask: Option<&[T]>,
) {
    let stretch = spread.band(pre.len(), STRETCH_ALIGN, cost(activation));
    if stretch >= pre.len() {
        return derivative(activation, pre, act, grad_out, mask);
    }
    spread.each(pre.par_chunks_mut(stretch).enumerate(), |(i, p)| {
        let (start, len) = (i * stretch, p.len());
        derivative(activation, p, part(act, start, len), &grad_out[start..start + len], mask.map(|m| &m[start..start + len]));
    });
}

/// In place: `pre <- grad_out * mask * f'(pre)`, one loop per activation so each vectorises.
pub(super) fn derivative<T: Real>(activation: Activation, pre: &mut [T], act: &[T], grad_out: &[T], mask: Option<&[T]>) {
    let half = T::narrow(0.5);
    let inv_sqrt2 = T::narrow(std::f64::consts::FRAC_1_SQRT_2);
    let density = T::narrow(FRAC_1_SQRT_2PI);
    match activation {
        Activation::Relu => {
            for (p, &g) in pre.iter_mut().zip(grad_out) {
                *p = if *p > T::zero() { g } else { T::zero() };
            }
        }
        Activation::Sigmoid => {
            for ((p, &g), &a) in pre.iter_mut().zip(grad_out).zip(act) {
                *p = g * (a * (T::one() - a));
            }
        }
        Activation::Tanh => {
            for ((p, &g), &a) in pre.iter_mut().zip(grad_out).zip(act) {
                *p = g * (T::one() - a * a);
            }
        }
        Activation::Gelu => {
            for (p, &g) in pre.iter_mut().zip(grad_out) {
                let x = *p;
                *p = g * (half * (T::one() + (x * inv_sqrt2).erf()) + x * density * (-(half * x * x)).exp());
            }
        }
        Activation::Identity => pre.copy_from_slice(grad_out),
    }
    if let Some(mask) = mask {
        for (p, &m) in pre.iter_mut().zip(mask) {
            *p *= m;
        }
    }
}
