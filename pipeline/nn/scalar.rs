//! The element types the training engine computes in: f32 for every run, f64 for gradient and
//! convergence tests. Elementary functions come from the pure-Rust `libm`, so that their results
//! do not depend on the platform's C library.

use candle_core::WithDType;

pub trait Real: WithDType + Default + std::fmt::Debug + std::ops::Neg<Output = Self> {
    fn exp(self) -> Self;
    fn tanh(self) -> Self;
    fn erf(self) -> Self;
    fn sqrt(self) -> Self;
    /// `x` rounded to this type.
    fn of(x: f64) -> Self {
        Self::from_f64(x)
    }
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
}
