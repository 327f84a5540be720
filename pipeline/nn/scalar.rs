//! The element types the training engine computes in: f32 for every run, f64 for gradient and
//! convergence tests. Elementary functions come from the pure-Rust `libm`, so that their results
//! do not depend on the platform's C library. Each type names the matrix-multiply tile it
//! computes with at a dispatch level (f64, used only by tests, always the scalar one).

use candle_core::WithDType;

use super::dispatch::Level;
use super::microkernel::{self, Kernels};

pub trait Real: WithDType + Default + std::fmt::Debug + std::ops::Neg<Output = Self> {
    fn exp(self) -> Self;
    fn tanh(self) -> Self;
    fn erf(self) -> Self;
    fn sqrt(self) -> Self;
    /// Exactly as f64 (inlinable here, unlike candle's `to_f64`, so hot loops vectorise).
    fn widen(self) -> f64;
    /// `x` rounded to this type.
    fn narrow(x: f64) -> Self;
    /// The kernels of the portable matrix multiply at `level` (`nn/microkernel.rs`).
    fn kernels(level: Level) -> Kernels<Self>;
}

impl Real for f32 {
    fn exp(self) -> Self {
        libm::expf(self)
    }
    fn tanh(self) -> Self {
        libm::tanhf(self)
    }
    fn erf(self) -> Self {
        libm::erff(self)
    }
    fn sqrt(self) -> Self {
        f32::sqrt(self)
    }
    #[inline(always)]
    fn widen(self) -> f64 {
        f64::from(self)
    }
    #[inline(always)]
    fn narrow(x: f64) -> Self {
        x as f32
    }
    fn kernels(level: Level) -> Kernels<Self> {
        microkernel::f32_kernels(level)
    }
}

impl Real for f64 {
    fn exp(self) -> Self {
        libm::exp(self)
    }
    fn tanh(self) -> Self {
        libm::tanh(self)
    }
    fn erf(self) -> Self {
        libm::erf(self)
    }
    fn sqrt(self) -> Self {
        f64::sqrt(self)
    }
    #[inline(always)]
    fn widen(self) -> f64 {
        self
    }
    #[inline(always)]
    fn narrow(x: f64) -> Self {
        x
    }
    fn kernels(_level: Level) -> Kernels<Self> {
        microkernel::scalar::<f64>()
    }
}
