//! Layer building blocks: linear maps with seeded initialisation, batch normalisation with running
//! statistics, activations, inverted dropout and Gaussian input noise drawn from our own streams.

use candle_core::{DType, Device, Tensor, Var};

use crate::error::Result;
use crate::manifest::Activation;
use crate::rng::Stream;

/// A tensor built from values drawn on the host, so that the values depend only on the stream.
pub fn tensor_from(values: Vec<f32>, shape: (usize, usize), dtype: DType) -> Result<Tensor> {
    let t = Tensor::from_vec(values, shape, &Device::Cpu)?;
    Ok(if dtype == DType::F32 { t } else { t.to_dtype(dtype)? })
}

/// `y = x W + b` with `W` stored as (inputs, outputs).
pub struct Linear {
    pub weight: Var,
    pub bias: Var,
}

impl Linear {
    /// Uniform initialisation on [-limit, limit]: He (Kaiming) with limit sqrt(6 / fan_in) for
    /// ReLU and GELU (He et al. 2015), Glorot with sqrt(6 / (fan_in + fan_out)) otherwise (Glorot
    /// and Bengio 2010). Biases start at zero. Values are drawn row by row from `init`.
    pub fn new(inputs: usize, outputs: usize, activation: Activation, init: &mut Stream, dtype: DType) -> Result<Self> {
        let limit = match activation {
            Activation::Relu | Activation::Gelu => (6.0 / inputs as f64).sqrt(),
            _ => (6.0 / (inputs + outputs) as f64).sqrt(),
        };
        let values: Vec<f32> = (0..inputs * outputs).map(|_| ((2.0 * init.uniform() - 1.0) * limit) as f32).collect();
        Ok(Linear {
            weight: Var::from_tensor(&tensor_from(values, (inputs, outputs), dtype)?)?,
            bias: Var::from_tensor(&Tensor::zeros((1, outputs), dtype, &Device::Cpu)?)?,
        })
    }

    pub fn forward(&self, x: &Tensor) -> Result<Tensor> {
        Ok(x.matmul(self.weight.as_tensor())?.broadcast_add(self.bias.as_tensor())?)
    }
}

/// Batch normalisation (Ioffe and Szegedy 2015): batch statistics while training, running
/// statistics (momentum 0.1, unbiased variance, as PyTorch keeps them) at evaluation.
pub struct BatchNorm {
    pub gamma: Var,
    pub beta: Var,
    pub running_mean: Tensor,
    pub running_var: Tensor,
}

pub const BN_EPS: f64 = 1e-5;
pub const BN_MOMENTUM: f64 = 0.1;

impl BatchNorm {
    pub fn new(width: usize, dtype: DType) -> Result<Self> {
        let dev = Device::Cpu;
        Ok(BatchNorm {
            gamma: Var::from_tensor(&Tensor::ones((1, width), dtype, &dev)?)?,
            beta: Var::from_tensor(&Tensor::zeros((1, width), dtype, &dev)?)?,
            running_mean: Tensor::zeros((1, width), dtype, &dev)?,
            running_var: Tensor::ones((1, width), dtype, &dev)?,
        })
    }

    pub fn forward(&mut self, x: &Tensor, train: bool) -> Result<Tensor> {
        let (mean, var) = if train {
            let n = x.dim(0)?;
            let mean = x.mean_keepdim(0)?;
            let centred = x.broadcast_sub(&mean)?;
            let var = centred.sqr()?.mean_keepdim(0)?;
            let unbiased = if n > 1 { var.affine(n as f64 / (n as f64 - 1.0), 0.0)? } else { var.clone() };
            self.running_mean = ((&self.running_mean * (1.0 - BN_MOMENTUM))? + (mean.detach() * BN_MOMENTUM)?)?;
            self.running_var = ((&self.running_var * (1.0 - BN_MOMENTUM))? + (unbiased.detach() * BN_MOMENTUM)?)?;
            (mean, var)
        } else {
            (self.running_mean.clone(), self.running_var.clone())
        };
        let normalised = x.broadcast_sub(&mean)?.broadcast_div(&(var + BN_EPS)?.sqrt()?)?;
        Ok(normalised.broadcast_mul(self.gamma.as_tensor())?.broadcast_add(self.beta.as_tensor())?)
    }
}

pub fn activate(x: &Tensor, activation: Activation) -> Result<Tensor> {
    Ok(match activation {
        Activation::Relu => x.relu()?,
        Activation::Sigmoid => candle_nn::ops::sigmoid(x)?,
        Activation::Tanh => x.tanh()?,
        // The exact form 0.5 x (1 + erf(x / sqrt 2)), composed from candle's erf (its own Rust
        // code, not the platform libm). candle's fused `gelu_erf` is not used: its backward pass
        // rounds 1/sqrt(2 pi) to 0.398942, which the finite-difference test detects.
        Activation::Gelu => ((x * 0.5)? * ((x * std::f64::consts::FRAC_1_SQRT_2)?.erf()? + 1.0)?)?,
        Activation::Identity => x.clone(),
    })
}

/// Inverted dropout: each unit is kept with probability 1 - p and scaled by 1 / (1 - p), so the
/// expected output equals the input; the mask is drawn from `stream`, one draw per unit.
pub fn dropout(x: &Tensor, p: f64, stream: &mut Stream) -> Result<Tensor> {
    if p <= 0.0 {
        return Ok(x.clone());
    }
    let (rows, cols) = x.dims2()?;
    let keep = (1.0 - p) as f32;
    let scale = 1.0 / keep;
    let mask: Vec<f32> = (0..rows * cols).map(|_| if stream.uniform_f32() < keep { scale } else { 0.0 }).collect();
    Ok(x.mul(&tensor_from(mask, (rows, cols), x.dtype())?)?)
}

/// Adds N(0, sigma^2) noise to every input, drawn from `stream`.
pub fn input_noise(x: &Tensor, sigma: f64, stream: &mut Stream) -> Result<Tensor> {
    if sigma <= 0.0 {
        return Ok(x.clone());
    }
    let (rows, cols) = x.dims2()?;
    let noise: Vec<f32> = (0..rows * cols).map(|_| (sigma * stream.normal()) as f32).collect();
    Ok(x.add(&tensor_from(noise, (rows, cols), x.dtype())?)?)
}
