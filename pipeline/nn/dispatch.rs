//! Which instruction set the portable matrix kernels (`nn/microkernel.rs`) run on: the dispatch
//! level. Every level computes the same bits (each output element is one chain of fused
//! multiply-adds in the same order), so the level decides speed only. It is chosen once per
//! process from the CPU's features, or forced with `TABCARD_KERNEL=scalar|avx2|avx512|neon`, and
//! recorded in every run's `environment.json`. Nothing here reads cache sizes or core counts.

use std::sync::OnceLock;

use crate::error::{Error, Result};

/// The environment variable that forces a dispatch level.
pub const KERNEL_VARIABLE: &str = "TABCARD_KERNEL";

/// A dispatch level of the portable kernels.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Level {
    /// One element at a time with the pure-Rust `libm::fmaf` (correctly rounded in software, so
    /// independent of the CPU and the C library). Available everywhere.
    Scalar,
    /// 8-lane AVX2 vectors with FMA3 (x86-64).
    Avx2,
    /// 16-lane AVX-512F vectors (x86-64).
    Avx512,
    /// 4-lane Advanced SIMD (NEON) vectors with their fused multiply-add (aarch64).
    Neon,
}

impl Level {
    pub const ALL: [Level; 4] = [Level::Scalar, Level::Avx2, Level::Avx512, Level::Neon];

    /// The name `TABCARD_KERNEL` takes and `environment.json` records.
    pub fn name(self) -> &'static str {
        match self {
            Level::Scalar => "scalar",
            Level::Avx2 => "avx2",
            Level::Avx512 => "avx512",
            Level::Neon => "neon",
        }
    }

    /// Whether this CPU can run the level.
    pub fn available(self) -> bool {
        match self {
            Level::Scalar => true,
            #[cfg(target_arch = "x86_64")]
            Level::Avx2 => std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma"),
            #[cfg(target_arch = "x86_64")]
            Level::Avx512 => std::is_x86_feature_detected!("avx512f"),
            #[cfg(target_arch = "aarch64")]
            Level::Neon => std::arch::is_aarch64_feature_detected!("neon"),
            #[allow(unreachable_patterns)]
            _ => false,
        }
    }

    /// The levels this CPU can run, slowest first.
    pub fn available_levels() -> Vec<Level> {
        Level::ALL.into_iter().filter(|l| l.available()).collect()
    }

    /// The fastest level this CPU can run.
    pub fn best() -> Level {
        Level::ALL.into_iter().rev().find(|l| l.available()).unwrap_or(Level::Scalar)
    }

    /// The level named `name` if this CPU can run it.
    pub fn parse(name: &str) -> std::result::Result<Level, String> {
        let names = || Level::ALL.map(Level::name).join(", ");
        let level = match name.trim().to_ascii_lowercase().as_str() {
            "scalar" => Level::Scalar,
            "avx2" => Level::Avx2,
            "avx512" => Level::Avx512,
            "neon" => Level::Neon,
            other => return Err(format!("{KERNEL_VARIABLE}={other:?} is not a dispatch level (one of {})", names())),
        };
        if !level.available() {
            let here = Level::available_levels().iter().map(|l| l.name()).collect::<Vec<_>>().join(", ");
            return Err(format!("{KERNEL_VARIABLE}={}: this CPU cannot run that level (it can run: {here})", level.name()));
        }
        Ok(level)
    }

    /// The level this process computes with: `TABCARD_KERNEL` when set, else [`Level::best`].
    /// Read once; an unusable `TABCARD_KERNEL` is an error, never a silent fallback.
    pub fn active() -> Result<Level> {
        static ACTIVE: OnceLock<std::result::Result<Level, String>> = OnceLock::new();
        ACTIVE
            .get_or_init(|| match std::env::var(KERNEL_VARIABLE) {
                Ok(name) if !name.trim().is_empty() => Level::parse(&name),
                _ => Ok(Level::best()),
            })
            .clone()
            .map_err(Error::Kernel)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_unknown_levels_are_errors() {
        for level in Level::available_levels() {
            assert_eq!(Level::parse(level.name()), Ok(level));
        }
        assert!(Level::parse("sse9").unwrap_err().contains("not a dispatch level"));
        for level in Level::ALL.into_iter().filter(|l| !l.available()) {
            assert!(Level::parse(level.name()).unwrap_err().contains("this CPU cannot run that level"));
        }
        assert_eq!(Level::parse(" Scalar "), Ok(Level::Scalar));
        assert!(Level::best().available());
    }
}
