//! The multilayer perceptron built from a model configuration: hidden layers (linear, optional
//! batch norm, activation, dropout), optional residual blocks x + f(x), Gaussian input noise, and
//! a linear head. Parameters and buffers have stable names, so weights can be hashed and saved in
//! a fixed order and loaded back for scoring.

use candle_core::{DType, Tensor, Var};

use super::layers::{activate, dropout, input_noise, tensor_from, BatchNorm, Linear};
use crate::error::{Error, Result};
use crate::manifest::{Activation, ModelSpec};
use crate::rng::Stream;

struct Hidden {
    linear: Linear,
    batch_norm: Option<BatchNorm>,
    residual: bool,
}

/// Training draws come from these streams; evaluation draws nothing.
pub enum Mode<'a> {
    Train { dropout: &'a mut Stream, noise: &'a mut Stream },
    Eval,
}

pub struct Mlp {
    pub spec: ModelSpec,
    pub inputs: usize,
    pub outputs: usize,
    hidden: Vec<Hidden>,
    head: Linear,
}

/// A named tensor with its shape and f32 values, the unit of hashing and saving.
#[derive(Debug, Clone, PartialEq)]
pub struct NamedTensor {
    pub name: String,
    pub shape: Vec<usize>,
    pub values: Vec<f32>,
}

/// Whether hidden layer `i`, fed `width_in` values, adds its input to its output: residual
/// blocks need equal widths and never start at the first layer.
pub fn has_residual(spec: &ModelSpec, i: usize, width_in: usize) -> bool {
    spec.residual && i > 0 && spec.hidden.get(i) == Some(&width_in)
}

impl Mlp {
    /// A freshly initialised network; initial values come from `init` in layer order.
    pub fn new(spec: &ModelSpec, inputs: usize, outputs: usize, init: &mut Stream, dtype: DType) -> Result<Self> {
        let mut hidden = Vec::with_capacity(spec.hidden.len());
        let mut width = inputs;
        for (i, &w) in spec.hidden.iter().enumerate() {
            hidden.push(Hidden {
                linear: Linear::new(width, w, spec.activation, init, dtype)?,
                batch_norm: if spec.batch_norm { Some(BatchNorm::new(w, dtype)?) } else { None },
                residual: has_residual(spec, i, width),
            });
            width = w;
        }
        let head = Linear::new(width, outputs, Activation::Identity, init, dtype)?;
        Ok(Mlp { spec: spec.clone(), inputs, outputs, hidden, head })
    }

    pub fn forward(&mut self, x: &Tensor, mode: &mut Mode<'_>) -> Result<Tensor> {
        let train = matches!(mode, Mode::Train { .. });
        let mut h = match mode {
            Mode::Train { noise, .. } => input_noise(x, self.spec.input_noise, noise)?,
            Mode::Eval => x.clone(),
        };
        for layer in &mut self.hidden {
            let mut z = layer.linear.forward(&h)?;
            if let Some(bn) = &mut layer.batch_norm {
                z = bn.forward(&z, train)?;
            }
            z = activate(&z, self.spec.activation)?;
            if let Mode::Train { dropout: stream, .. } = mode {
                z = dropout(&z, self.spec.dropout, stream)?;
            }
            h = if layer.residual { (h + z)? } else { z };
        }
        self.head.forward(&h)
    }

    /// Trainable parameters in name order, with whether weight decay applies (weights only, not
    /// biases or batch-norm scales and shifts: common practice).
    pub fn parameters(&self) -> Vec<(String, &Var, bool)> {
        let mut out = Vec::new();
        for (i, layer) in self.hidden.iter().enumerate() {
            out.push((format!("layer{i:02}.weight"), &layer.linear.weight, true));
            out.push((format!("layer{i:02}.bias"), &layer.linear.bias, false));
            if let Some(bn) = &layer.batch_norm {
                out.push((format!("layer{i:02}.bn.gamma"), &bn.gamma, false));
                out.push((format!("layer{i:02}.bn.beta"), &bn.beta, false));
            }
        }
        out.push(("output.weight".into(), &self.head.weight, true));
        out.push(("output.bias".into(), &self.head.bias, false));
        out.sort_by(|a, b| a.0.cmp(&b.0));
        out
    }

    pub fn parameter_count(&self) -> usize {
        self.parameters().iter().map(|(_, v, _)| v.elem_count()).sum()
    }

    /// Every tensor that defines the model (parameters and batch-norm running statistics), sorted
    /// by name, as f32.
    pub fn named_tensors(&self) -> Result<Vec<NamedTensor>> {
        let mut out = Vec::new();
        for (name, t) in self.tensors() {
            let values = t.to_dtype(DType::F32)?.flatten_all()?.to_vec1::<f32>()?;
            out.push(NamedTensor { name, shape: t.dims().to_vec(), values });
        }
        out.sort_by(|a, b| a.name.cmp(&b.name));
        Ok(out)
    }

    /// Parameters (in name order), then batch-norm running statistics layer by layer.
    fn tensors(&self) -> Vec<(String, &Tensor)> {
        let mut out: Vec<(String, &Tensor)> = self.parameters().into_iter().map(|(name, var, _)| (name, var.as_tensor())).collect();
        for (i, layer) in self.hidden.iter().enumerate() {
            if let Some(bn) = &layer.batch_norm {
                out.push((format!("layer{i:02}.bn.running_mean"), &bn.running_mean));
                out.push((format!("layer{i:02}.bn.running_var"), &bn.running_var));
            }
        }
        out
    }

    /// Every parameter and buffer (names as in [`Mlp::named_tensors`]) as flat host values in
    /// the model's own precision `T`.
    pub fn host_values<T: candle_core::WithDType>(&self) -> Result<Vec<(String, Vec<T>)>> {
        self.tensors().into_iter().map(|(name, t)| Ok((name, t.flatten_all()?.to_vec1::<T>()?))).collect()
    }

    /// Overwrites parameters and buffers with host values in the model's precision (the inverse
    /// of [`Mlp::host_values`]; every name must be known and every length right).
    pub fn set_host_values<T: candle_core::WithDType>(&mut self, values: &[(String, Vec<T>)]) -> Result<()> {
        let to_tensor = |v: &[T], dims: &[usize]| -> Result<Tensor> {
            if v.len() != dims.iter().product::<usize>() {
                return Err(Error::Engine(format!("{} values for a tensor of shape {dims:?}", v.len())));
            }
            Ok(Tensor::from_slice(v, dims, &candle_core::Device::Cpu)?)
        };
        let parameters: Vec<(String, Var)> = self.parameters().into_iter().map(|(n, v, _)| (n, v.clone())).collect();
        for (name, v) in values {
            if let Some((_, var)) = parameters.iter().find(|(n, _)| n == name) {
                var.set(&to_tensor(v, var.dims())?)?;
                continue;
            }
            let buffer = name.strip_prefix("layer").and_then(|rest| {
                let (index, field) = rest.split_once(".bn.")?;
                let layer = self.hidden.get_mut(index.parse::<usize>().ok()?)?.batch_norm.as_mut()?;
                match field {
                    "running_mean" => Some(&mut layer.running_mean),
                    "running_var" => Some(&mut layer.running_var),
                    _ => None,
                }
            });
            let Some(buffer) = buffer else {
                return Err(Error::Engine(format!("the model has no tensor `{name}`")));
            };
            let dims = buffer.dims().to_vec();
            *buffer = to_tensor(v, &dims)?;
        }
        Ok(())
    }

    /// Overwrites every tensor with stored values (the inverse of [`Mlp::named_tensors`]).
    pub fn load(&mut self, tensors: &[NamedTensor]) -> Result<()> {
        let find = |name: &str, shape: &[usize]| -> Result<Tensor> {
            let t = tensors.iter().find(|t| t.name == name).ok_or_else(|| Error::Engine(format!("stored weights lack tensor `{name}`")))?;
            if t.shape != shape {
                return Err(Error::Engine(format!("stored tensor `{name}` has shape {:?}, the model needs {shape:?}", t.shape)));
            }
            tensor_from(t.values.clone(), (shape[0], shape[1]), DType::F32)
        };
        for (name, var, _) in self.parameters() {
            let dtype = var.dtype();
            var.set(&find(&name, var.dims())?.to_dtype(dtype)?)?;
        }
        for (i, layer) in self.hidden.iter_mut().enumerate() {
            if let Some(bn) = &mut layer.batch_norm {
                let dims = bn.running_mean.dims().to_vec();
                let dtype = bn.running_mean.dtype();
                bn.running_mean = find(&format!("layer{i:02}.bn.running_mean"), &dims)?.to_dtype(dtype)?;
                bn.running_var = find(&format!("layer{i:02}.bn.running_var"), &dims)?.to_dtype(dtype)?;
            }
        }
        Ok(())
    }
}
