//! The training engine: a network's parameters, gradients and per-layer activations in host
//! buffers sized once per run, with the training-mode forward pass and the backward pass written
//! out by hand over the portable matrix multiply of `nn/matmul.rs` (bias and batch-norm
//! statistics fused into single passes, dropout and activation derivatives applied in place,
//! every sum in a fixed row order), and the evaluation-mode pass that validation and
//! `predict` use. A training step allocates nothing; its products and element-wise passes may be
//! split across the threads of its pool (`nn/spread.rs`), which changes no bit. candle's
//! [`Mlp`] stays the model's definition and stored form: the engine starts from its values and
//! writes its values back into it. `tests/training.rs` checks the engine's gradients and outputs
//! against candle's autograd and against finite differences.

use super::dispatch::Level;
use super::host_ops::{activate_spread, column_sums, derivative_spread, normalise, normalise_backward, Norm};
use super::layers::BN_EPS;
use super::matmul::{matmul, View, Workspace};
use super::mlp::{has_residual, Mlp};
use super::optim::{Optimizer, Step};
use super::scalar::Real;
use crate::data::prep::Matrix;
use crate::error::{Error, Result};
use crate::manifest::Activation;
use crate::rng::Stream;

/// One affine layer with what follows it: batch norm, activation, dropout, residual (hidden
/// layers), or nothing (the head).
#[derive(Clone)]
struct Dense<T> {
    name: String,
    inputs: usize,
    outputs: usize,
    hidden: bool,
    residual: bool,
    /// (inputs, outputs), row-major, as candle's `Linear` stores it.
    weight: Vec<T>,
    bias: Vec<T>,
    norm: Option<Norm<T>>,
    grad_weight: Vec<T>,
    grad_bias: Vec<T>,
    /// The activation's input (after batch norm) of the last batch; its gradient after backward.
    pre: Vec<T>,
    /// The activation's output, kept when its derivative is cheapest from it (sigmoid, tanh).
    act: Vec<T>,
    /// Inverted-dropout multipliers (0 or 1 / (1 - p)) of the last batch.
    mask: Vec<T>,
    /// The layer's output: the next layer's input, or the logits.
    out: Vec<T>,
}

impl<T: Real> Dense<T> {
    /// bias + input W for the first `rows` rows of `input`, into `pre` (hidden layers, before
    /// batch norm and activation) or `out` (the head): the bias fills the rows and the product is
    /// accumulated onto it by the product (each chain starts from the bias).
    fn affine(&mut self, input: &[T], rows: usize, ws: &mut Workspace<T>) {
        let (n_in, n_out) = (self.inputs, self.outputs);
        let target = if self.hidden { &mut self.pre } else { &mut self.out };
        for row in target[..rows * n_out].chunks_exact_mut(n_out) {
            row.copy_from_slice(&self.bias);
        }
        matmul(&mut target[..rows * n_out], View::new(&input[..rows * n_in], rows, n_in), View::new(&self.weight, n_in, n_out), true, ws);
    }

    /// (name, value, gradient) of each trainable parameter under the model's names.
    fn parameters(&self) -> Vec<(String, &[T], &[T])> {
        let mut out = vec![
            (format!("{}.weight", self.name), &self.weight[..], &self.grad_weight[..]),
            (format!("{}.bias", self.name), &self.bias[..], &self.grad_bias[..]),
        ];
        if let Some(n) = &self.norm {
            out.push((format!("{}.bn.gamma", self.name), &n.gamma[..], &n.grad_gamma[..]));
            out.push((format!("{}.bn.beta", self.name), &n.beta[..], &n.grad_beta[..]));
        }
        out
    }
}

/// Which pass a layer walk makes: training (batch statistics, dropout drawn from the stream) or
/// evaluation (running statistics as sqrt(running_var + eps) per layer, no dropout).
enum Pass<'a, T> {
    Training { dropout: &'a mut Stream },
    Evaluation { running_std: &'a [Option<Vec<T>>] },
}

#[derive(Clone)]
pub struct Engine<T> {
    activation: Activation,
    dropout: f64,
    input_noise: f64,
    inputs: usize,
    capacity: usize,
    /// Hidden layers in order, then the head.
    layers: Vec<Dense<T>>,
    input: Vec<T>,
    grad_out: Vec<T>,
    grad_in: Vec<T>,
    /// Raw 32-bit draws for one layer's dropout mask.
    draws: Vec<u32>,
    rows: usize,
    /// Packing buffers and the dispatch level of every matrix product.
    workspace: Workspace<T>,
    /// Whether evaluation may hand runs of rows to the pool's other threads ([`Engine::evaluate`]);
    /// speed only, never the bits.
    splits_rows: bool,
}

fn take<T: Clone>(values: &mut Vec<(String, Vec<T>)>, name: &str, len: usize) -> Result<Vec<T>> {
    let i = values.iter().position(|(n, _)| n == name).ok_or_else(|| Error::Engine(format!("the model has no tensor `{name}`")))?;
    let (_, v) = values.swap_remove(i);
    if v.len() != len {
        return Err(Error::Engine(format!("tensor `{name}` has {} values, the engine expects {len}", v.len())));
    }
    Ok(v)
}

/// Named host values of every parameter and running statistic ([`Engine::values`]).
pub type Values<T> = Vec<(String, Vec<T>)>;

/// Sets the weights of one row's outputs for [`Engine::input_gradients`]: `(row, outputs, weights)`.
pub type OutputWeights<'a, T> = dyn Fn(usize, &[T], &mut [T]) + Sync + 'a;

/// Rows per block in evaluation mode. Fixed, so that a row's outputs never depend on how many
/// rows were scored with it (training-time validation and `predict` give the same bits).
pub const EVAL_BLOCK: usize = 256;

impl<T: Real> Engine<T> {
    /// An engine holding `model`'s current values, for training batches of up to `batch` rows,
    /// computing at the process's dispatch level ([`Level::active`]) on the calling thread.
    pub fn from_model(model: &Mlp, batch: usize) -> Result<Self> {
        Engine::spread_over(model, batch, 1)
    }

    /// As [`Engine::from_model`], splitting large products and element-wise passes into at most
    /// `threads` pieces for the threads of the pool it computes on (`nn/spread.rs`): the same bits
    /// for every `threads`.
    pub fn spread_over(model: &Mlp, batch: usize, threads: usize) -> Result<Self> {
        let level = Level::active()?;
        let capacity = batch.max(EVAL_BLOCK);
        let spec = &model.spec;
        let mut values = model.host_values::<T>()?;
        let zeros = |n: usize| vec![T::zero(); n];
        let mut layers = Vec::with_capacity(spec.hidden.len() + 1);
        let mut width = model.inputs;
        let keeps_act = matches!(spec.activation, Activation::Sigmoid | Activation::Tanh);
        for (i, &w) in spec.hidden.iter().enumerate() {
            let name = format!("layer{i:02}");
            let norm = if spec.batch_norm {
                Some(Norm {
                    gamma: take(&mut values, &format!("{name}.bn.gamma"), w)?,
                    beta: take(&mut values, &format!("{name}.bn.beta"), w)?,
                    running_mean: take(&mut values, &format!("{name}.bn.running_mean"), w)?,
                    running_var: take(&mut values, &format!("{name}.bn.running_var"), w)?,
                    grad_gamma: zeros(w),
                    grad_beta: zeros(w),
                    normalised: zeros(capacity * w),
                    mean: zeros(w),
                    inv_std: zeros(w),
                })
            } else {
                None
            };
            layers.push(Dense {
                weight: take(&mut values, &format!("{name}.weight"), width * w)?,
                bias: take(&mut values, &format!("{name}.bias"), w)?,
                name,
                inputs: width,
                outputs: w,
                hidden: true,
                residual: has_residual(spec, i, width),
                norm,
                grad_weight: zeros(width * w),
                grad_bias: zeros(w),
                pre: zeros(capacity * w),
                act: if keeps_act { zeros(capacity * w) } else { Vec::new() },
                mask: if spec.dropout > 0.0 { zeros(capacity * w) } else { Vec::new() },
                out: zeros(capacity * w),
            });
            width = w;
        }
        let outputs = model.outputs;
        layers.push(Dense {
            name: "output".into(),
            weight: take(&mut values, "output.weight", width * outputs)?,
            bias: take(&mut values, "output.bias", outputs)?,
            inputs: width,
            outputs,
            hidden: false,
            residual: false,
            norm: None,
            grad_weight: zeros(width * outputs),
            grad_bias: zeros(outputs),
            pre: Vec::new(),
            act: Vec::new(),
            mask: Vec::new(),
            out: zeros(capacity * outputs),
        });
        let widest = layers.iter().map(|l| l.outputs.max(l.inputs)).max().unwrap_or(1);
        Ok(Engine {
            activation: spec.activation,
            dropout: spec.dropout,
            input_noise: spec.input_noise,
            inputs: model.inputs,
            capacity,
            layers,
            input: zeros(capacity * model.inputs),
            grad_out: zeros(capacity * widest),
            grad_in: zeros(capacity * widest),
            draws: if spec.dropout > 0.0 { vec![0; capacity * widest] } else { Vec::new() },
            rows: 0,
            workspace: Workspace::spread_over(level, threads),
            splits_rows: true,
        })
    }

    /// Keeps every row this engine evaluates on the calling thread, for a caller that already
    /// spreads whole evaluations across the pool's threads (each then needs no copies of the
    /// engine). Speed only: a row's outputs never depend on where it was computed.
    pub fn keep_rows_on_this_thread(&mut self) {
        self.splits_rows = false;
    }

    /// How many threads computed pieces of this engine's work so far (1 when nothing was split).
    pub fn threads_taken(&self) -> usize {
        self.workspace.spread().threads_taken()
    }

    /// Parameter slots for the optimizer: weight, bias, gamma, beta per layer.
    pub fn slot_count(&self) -> usize {
        4 * self.layers.len()
    }

    /// Every parameter and running statistic under the model's names, for [`Mlp::set_host_values`].
    pub fn values(&self) -> Values<T> {
        let mut out = Vec::new();
        for l in &self.layers {
            out.extend(l.parameters().into_iter().map(|(name, value, _)| (name, value.to_vec())));
            if let Some(n) = &l.norm {
                out.push((format!("{}.bn.running_mean", l.name), n.running_mean.clone()));
                out.push((format!("{}.bn.running_var", l.name), n.running_var.clone()));
            }
        }
        out
    }

    /// Overwrites parameters and running statistics with values from [`Engine::values`].
    pub fn load_values(&mut self, values: &[(String, Vec<T>)]) -> Result<()> {
        let mut values = values.to_vec();
        for l in &mut self.layers {
            l.weight = take(&mut values, &format!("{}.weight", l.name), l.weight.len())?;
            l.bias = take(&mut values, &format!("{}.bias", l.name), l.bias.len())?;
            if let Some(n) = &mut l.norm {
                let w = n.gamma.len();
                n.gamma = take(&mut values, &format!("{}.bn.gamma", l.name), w)?;
                n.beta = take(&mut values, &format!("{}.bn.beta", l.name), w)?;
                n.running_mean = take(&mut values, &format!("{}.bn.running_mean", l.name), w)?;
                n.running_var = take(&mut values, &format!("{}.bn.running_var", l.name), w)?;
            }
        }
        Ok(())
    }

    /// Raw outputs (rows x outputs, as f32) of every row of `x` in evaluation mode: running
    /// statistics for batch norm, no dropout, no noise; in blocks of [`EVAL_BLOCK`] rows. On a
    /// pool's thread, runs of whole blocks go to the pool's threads, each on a copy of the engine:
    /// a row's outputs never depend on the rows scored with it, so the bits are those of one thread.
    pub fn evaluate(&mut self, x: &Matrix) -> Vec<f32> {
        let per_row = self.work_per_row();
        self.over_row_runs(x, per_row, |engine, data, rows, _| engine.evaluate_rows(data, rows)).concat()
    }

    /// Multiply-adds of one row's forward pass.
    fn work_per_row(&self) -> usize {
        self.layers.iter().map(|l| l.inputs * l.outputs).sum()
    }

    /// `work(engine, data, rows, first)` over the rows of `x`, in row order: on a pool's thread,
    /// runs of whole [`EVAL_BLOCK`]s go to the pool's threads, the first on this engine and each
    /// other on a copy of it (`first` is the run's first row in `x`), when a block holds enough
    /// work (`work_per_row` multiply-adds a row) to be worth a piece and the engine may split its
    /// rows; else all of `x` on this engine, here.
    fn over_row_runs<R: Send>(
        &mut self,
        x: &Matrix,
        work_per_row: usize,
        work: impl Fn(&mut Engine<T>, &[f32], usize, usize) -> R + Sync,
    ) -> Vec<R> {
        use rayon::prelude::*;
        assert_eq!(x.cols, self.inputs, "{} input columns for an engine of {}", x.cols, self.inputs);
        let blocks = x.rows.div_ceil(EVAL_BLOCK);
        let threads = super::spread::threads_here().min(blocks);
        if threads < 2 || !self.splits_rows || EVAL_BLOCK * work_per_row < super::spread::piece_work() {
            return vec![work(self, &x.data, x.rows, 0)];
        }
        let run_rows = blocks.div_ceil(threads) * EVAL_BLOCK;
        let runs: Vec<&[f32]> = x.data.chunks(run_rows * self.inputs).collect();
        let Some((&own, others)) = runs.split_first() else { return Vec::new() };
        let mut copies: Vec<Engine<T>> = others.iter().map(|_| self.clone()).collect();
        let (first, rest) = rayon::join(
            || work(self, own, own.len() / x.cols, 0),
            || {
                others
                    .par_iter()
                    .zip(copies.par_iter_mut())
                    .enumerate()
                    .map(|(i, (data, engine))| work(engine, data, data.len() / x.cols, (i + 1) * run_rows))
                    .collect::<Vec<_>>()
            },
        );
        std::iter::once(first).chain(rest).collect()
    }

    /// [`Engine::evaluate`] of `rows` rows of `data` on this thread.
    fn evaluate_rows(&mut self, data: &[f32], rows: usize) -> Vec<f32> {
        let outputs = self.layers.last().map_or(0, |l| l.outputs);
        let mut result = Vec::with_capacity(rows * outputs);
        let d = self.inputs;
        let eps = T::narrow(BN_EPS);
        // sqrt(running_var + eps) per batch-norm layer, once per call rather than per block.
        let running_std: Vec<Option<Vec<T>>> =
            self.layers.iter().map(|l| l.norm.as_ref().map(|n| n.running_var.iter().map(|&v| (v + eps).sqrt()).collect())).collect();
        for start in (0..rows).step_by(EVAL_BLOCK) {
            let b = (rows - start).min(EVAL_BLOCK);
            for (v, &s) in self.input[..b * d].iter_mut().zip(&data[start * d..(start + b) * d]) {
                *v = T::narrow(f64::from(s));
            }
            self.walk_layers(b, Pass::Evaluation { running_std: &running_std });
            if let Some(head) = self.layers.last() {
                result.extend(head.out[..b * outputs].iter().map(|v| v.widen() as f32));
            }
        }
        result
    }

    /// Evaluation-mode outputs and input gradients of every row of `x`, in blocks of
    /// [`EVAL_BLOCK`] rows: running statistics for batch norm, no dropout, no noise, as
    /// [`Engine::evaluate`]. For each row, `seed(outputs, weights)` sets the weights of its outputs
    /// (for instance 1 on the one logit of a binary head), and the row's gradient is that of
    /// sum_j weight_j output_j with respect to its inputs. Returns (outputs, rows x outputs;
    /// gradients, rows x inputs) in the engine's precision. Parameter gradients are not touched.
    /// On a pool's thread, runs of whole blocks go to the pool's threads as in
    /// [`Engine::evaluate`], each on a copy of the engine: the same bits as one thread. `seed`
    /// is given each row's index in `x`.
    pub fn input_gradients(&mut self, x: &Matrix, seed: &OutputWeights<'_, T>) -> (Vec<T>, Vec<T>) {
        // A forward and a backward pass per row.
        let per_row = 2 * self.work_per_row();
        let parts = self.over_row_runs(x, per_row, |engine, data, rows, first| engine.input_gradients_rows(data, rows, first, seed));
        let (outputs, gradients): (Vec<Vec<T>>, Vec<Vec<T>>) = parts.into_iter().unzip();
        (outputs.concat(), gradients.concat())
    }

    /// [`Engine::input_gradients`] of `rows` rows of `data`, the first being row `first` of the
    /// whole, on this thread.
    fn input_gradients_rows(&mut self, data: &[f32], rows: usize, first: usize, seed: &OutputWeights<'_, T>) -> (Vec<T>, Vec<T>) {
        let k = self.layers.last().map_or(0, |l| l.outputs);
        let d = self.inputs;
        let mut outputs = Vec::with_capacity(rows * k);
        let mut gradients = Vec::with_capacity(rows * d);
        let eps = T::narrow(BN_EPS);
        // d/dz of gamma (z - mean) / std + beta, per batch-norm layer.
        let running_std: Vec<Option<Vec<T>>> =
            self.layers.iter().map(|l| l.norm.as_ref().map(|n| n.running_var.iter().map(|&v| (v + eps).sqrt()).collect())).collect();
        let slopes: Vec<Option<Vec<T>>> = self
            .layers
            .iter()
            .zip(&running_std)
            .map(|(l, std)| l.norm.as_ref().zip(std.as_ref()).map(|(n, s)| n.gamma.iter().zip(s).map(|(&g, &s)| g / s).collect()))
            .collect();
        for start in (0..rows).step_by(EVAL_BLOCK) {
            let b = (rows - start).min(EVAL_BLOCK);
            for (v, &s) in self.input[..b * d].iter_mut().zip(&data[start * d..(start + b) * d]) {
                *v = T::narrow(f64::from(s));
            }
            self.walk_layers(b, Pass::Evaluation { running_std: &running_std });
            if let Some(head) = self.layers.last() {
                let logits = &head.out[..b * k];
                outputs.extend_from_slice(logits);
                for (i, (row, g)) in logits.chunks_exact(k).zip(self.grad_out[..b * k].chunks_exact_mut(k)).enumerate() {
                    seed(first + start + i, row, g);
                }
            }
            for l in (0..self.layers.len()).rev() {
                let layer = &mut self.layers[l];
                let (n_in, n_out) = (layer.inputs, layer.outputs);
                let grad_out = &self.grad_out[..b * n_out];
                let grad_z: &[T] = if layer.hidden {
                    let pre = &mut layer.pre[..b * n_out];
                    derivative_spread(self.workspace.spread(), self.activation, pre, &layer.act, grad_out, None);
                    if let Some(slope) = &slopes[l] {
                        for row in pre.chunks_exact_mut(n_out) {
                            for (g, &s) in row.iter_mut().zip(slope) {
                                *g *= s;
                            }
                        }
                    }
                    pre
                } else {
                    grad_out
                };
                matmul(
                    &mut self.grad_in[..b * n_in],
                    View::new(grad_z, b, n_out),
                    View::new(&layer.weight, n_in, n_out).t(),
                    false,
                    &mut self.workspace,
                );
                if layer.residual {
                    for (g, &o) in self.grad_in[..b * n_in].iter_mut().zip(grad_out) {
                        *g += o;
                    }
                }
                std::mem::swap(&mut self.grad_out, &mut self.grad_in);
            }
            gradients.extend_from_slice(&self.grad_out[..b * d]);
        }
        (outputs, gradients)
    }

    /// Every parameter's gradient from the last backward pass, under the model's names.
    pub fn gradients(&self) -> Values<T> {
        self.layers.iter().flat_map(|l| l.parameters().into_iter().map(|(name, _, grad)| (name, grad.to_vec()))).collect()
    }

    /// Forward pass in training mode over rows `rows` of `x`: input noise, batch statistics
    /// (updating the running ones), dropout; masks and noise drawn row by row, unit by unit.
    pub fn forward(&mut self, x: &Matrix, rows: &[usize], dropout: &mut Stream, noise: &mut Stream) {
        let b = rows.len();
        assert!(b <= self.capacity && x.cols == self.inputs, "batch of {b}x{} for an engine of {}x{}", x.cols, self.capacity, self.inputs);
        self.rows = b;
        let d = self.inputs;
        for (dst, &r) in self.input.chunks_exact_mut(d).zip(rows) {
            for (v, &s) in dst.iter_mut().zip(x.row(r)) {
                *v = T::narrow(f64::from(s));
            }
        }
        if self.input_noise > 0.0 {
            let sigma = self.input_noise;
            for v in &mut self.input[..b * d] {
                *v += T::narrow(f64::from((sigma * noise.normal()) as f32));
            }
        }
        self.walk_layers(b, Pass::Training { dropout });
    }

    /// Every layer in order over the first `b` rows of `input`: the affine map, then for hidden
    /// layers batch norm (the batch's statistics in training, the running ones in evaluation), the
    /// activation, dropout (training only) and the residual connection.
    fn walk_layers(&mut self, b: usize, mut pass: Pass<'_, T>) {
        for l in 0..self.layers.len() {
            let (before, rest) = self.layers.split_at_mut(l);
            let input: &[T] = if l == 0 { &self.input } else { &before[l - 1].out };
            let layer = &mut rest[0];
            let (n_in, n_out) = (layer.inputs, layer.outputs);
            layer.affine(input, b, &mut self.workspace);
            if !layer.hidden {
                continue;
            }
            match &mut pass {
                Pass::Training { .. } => {
                    if let Some(norm) = &mut layer.norm {
                        normalise(norm, &mut layer.pre[..b * n_out], b, n_out);
                    }
                }
                Pass::Evaluation { running_std } => {
                    if let (Some(norm), Some(std)) = (&layer.norm, &running_std[l]) {
                        for row in layer.pre[..b * n_out].chunks_exact_mut(n_out) {
                            for j in 0..n_out {
                                row[j] = (row[j] - norm.running_mean[j]) / std[j] * norm.gamma[j] + norm.beta[j];
                            }
                        }
                    }
                }
            }
            activate_spread(self.workspace.spread(), self.activation, &layer.pre[..b * n_out], &mut layer.act, &mut layer.out[..b * n_out]);
            if let Pass::Training { dropout } = &mut pass {
                if self.dropout > 0.0 {
                    let keep = (1.0 - self.dropout) as f32;
                    let scale = T::narrow(f64::from(1.0 / keep));
                    let mask = &mut layer.mask[..b * n_out];
                    let draws = &mut self.draws[..b * n_out];
                    dropout.fill_u32(draws);
                    // The same decision as `uniform_f32() < keep`, (u >> 8) 2^-24 < keep, in
                    // integers: keep 2^24 is exact, so u >> 8 < ceil(keep 2^24).
                    let threshold = (f64::from(keep) * f64::from(1u32 << 24)).ceil() as u32;
                    for (m, &u) in mask.iter_mut().zip(draws.iter()) {
                        *m = if (u >> 8) < threshold { scale } else { T::zero() };
                    }
                    for (o, &m) in layer.out[..b * n_out].iter_mut().zip(mask.iter()) {
                        *o *= m;
                    }
                }
            }
            if layer.residual {
                for (o, &i) in layer.out[..b * n_out].iter_mut().zip(&input[..b * n_in]) {
                    *o += i;
                }
            }
        }
    }

    /// The last batch's logits, rows x outputs, and the buffer their gradient goes into.
    pub fn logits_and_gradient(&mut self) -> (&[T], &mut [T]) {
        let b = self.rows;
        let head = self.layers.last().map(|l| (l.outputs, &l.out[..])).unwrap_or((0, &[]));
        (&head.1[..b * head.0], &mut self.grad_out[..b * head.0])
    }

    /// Backward pass from the logits' gradient (set through [`Engine::logits_and_gradient`]):
    /// every parameter's gradient, plus `l2` times each weight matrix (the coupled penalty).
    pub fn backward(&mut self, l2: f64) {
        let b = self.rows;
        let l2 = T::narrow(l2);
        for l in (0..self.layers.len()).rev() {
            let (before, rest) = self.layers.split_at_mut(l);
            let input: &[T] = if l == 0 { &self.input } else { &before[l - 1].out };
            let layer = &mut rest[0];
            let (n_in, n_out) = (layer.inputs, layer.outputs);
            let grad_out = &self.grad_out[..b * n_out];
            let grad_z: &[T] = if layer.hidden {
                let pre = &mut layer.pre[..b * n_out];
                derivative_spread(
                    self.workspace.spread(),
                    self.activation,
                    pre,
                    &layer.act,
                    grad_out,
                    if layer.mask.is_empty() { None } else { Some(&layer.mask[..b * n_out]) },
                );
                if let Some(norm) = &mut layer.norm {
                    normalise_backward(norm, pre, b, n_out);
                }
                pre
            } else {
                grad_out
            };
            matmul(
                &mut layer.grad_weight,
                View::new(&input[..b * n_in], b, n_in).t(),
                View::new(grad_z, b, n_out),
                false,
                &mut self.workspace,
            );
            if l2 != T::zero() {
                for (g, &w) in layer.grad_weight.iter_mut().zip(&layer.weight) {
                    *g += l2 * w;
                }
            }
            column_sums(grad_z, n_out, &mut layer.grad_bias);
            if l > 0 {
                matmul(
                    &mut self.grad_in[..b * n_in],
                    View::new(grad_z, b, n_out),
                    View::new(&layer.weight, n_in, n_out).t(),
                    false,
                    &mut self.workspace,
                );
                if layer.residual {
                    for (g, &o) in self.grad_in[..b * n_in].iter_mut().zip(grad_out) {
                        *g += o;
                    }
                }
                std::mem::swap(&mut self.grad_out, &mut self.grad_in);
            }
        }
    }

    /// The Euclidean norm of every parameter's gradient, accumulated in f64.
    pub fn gradient_norm(&self) -> f64 {
        let sq = |v: &[T]| v.iter().map(|g| g.widen() * g.widen()).sum::<f64>();
        let mut total = 0.0;
        for l in &self.layers {
            total += sq(&l.grad_weight) + sq(&l.grad_bias);
            if let Some(n) = &l.norm {
                total += sq(&n.grad_gamma) + sq(&n.grad_beta);
            }
        }
        total.sqrt()
    }

    /// One optimizer update of every parameter; weight decay applies to weight matrices only.
    pub fn update(&mut self, optimizer: &mut Optimizer, step: &Step) {
        for (i, l) in self.layers.iter_mut().enumerate() {
            let spread = self.workspace.spread();
            optimizer.update(spread, step, 4 * i, &mut l.weight, &l.grad_weight, true);
            optimizer.update(spread, step, 4 * i + 1, &mut l.bias, &l.grad_bias, false);
            if let Some(n) = &mut l.norm {
                optimizer.update(spread, step, 4 * i + 2, &mut n.gamma, &n.grad_gamma, false);
                optimizer.update(spread, step, 4 * i + 3, &mut n.beta, &n.grad_beta, false);
            }
        }
    }
}
