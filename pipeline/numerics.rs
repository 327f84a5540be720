//! What the bits of a trained model depend on, and keeping candle's own kernels single-threaded.
//!
//! Every number that reaches a stored result comes from tabcard's own code: matrix products from
//! the portable kernels (`nn/matmul.rs`, one fused multiply-add chain per output in a fixed order,
//! the same bits at every dispatch level), element-wise steps and reductions in a fixed order
//! (never following the vector width or the thread count), elementary functions from the
//! pure-Rust `libm`. So identical bits are promised for the same tabcard version and
//! [`KERNEL_VERSION`], whatever the CPU's vector features, cache sizes or core count. The
//! fingerprint below records the rest of the machine for the audit trail; nothing here reads a
//! value that changes a computed bit.

use serde::{Deserialize, Serialize};
use std::sync::Once;

use crate::error::Result;
use crate::nn::dispatch::Level;

/// Candle's version as locked in Cargo.lock (kept in step by a test). candle defines and stores
/// the model; it computes none of the trained values.
pub const CANDLE_VERSION: &str = "0.11.1";

/// The version of the numerics path: the portable kernels' order of operations and the engine's
/// fixed-order reductions. It changes only when a computed bit can change, and with it the tool
/// version (part of every experiment fingerprint).
pub const KERNEL_VERSION: &str = "portable v1";

/// What the numerics path consists of, for the card and `environment.json`.
pub const KERNEL_FEATURES: &str = "tabcard portable kernels (nn/matmul.rs, nn/microkernel.rs): one fused multiply-add chain per output in increasing inner index, blocks of fixed size; training engine nn/engine.rs v2; elementary functions from the pure-Rust libm";

static PIN: Once = Once::new();

/// Prepares the process for training, once: candle's kernels single-threaded (its matrix multiply
/// and element-wise pool read these variables), so that parallelism comes only from running
/// several runs at once. Called by the binary before any thread starts and by the trainer;
/// idempotent; changes no computed bit. (glibc's allocator keeps its defaults: the training
/// engine allocates its buffers once per run, so the per-operation allocations that once made
/// freed memory worth keeping are gone.)
pub fn prepare_process() {
    PIN.call_once(|| {
        // SAFETY-relevant note: std's environment functions take a process-wide lock, and this runs
        // once, before the first candle kernel reads the variables.
        std::env::set_var("RAYON_NUM_THREADS", "1");
        std::env::set_var("CANDLE_NUM_THREADS", "1");
    });
}

#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct NumericsFingerprint {
    pub tool_version: String,
    /// The git commit tabcard was built from (`+changes` when the tree had uncommitted edits).
    pub tool_commit: String,
    pub candle_version: String,
    /// [`KERNEL_VERSION`]: with the tool version, what decides whether bits are promised.
    #[serde(default)]
    pub kernel_version: String,
    pub kernel_features: String,
    /// The dispatch level the matrix products ran at (`scalar`, `avx2`, `avx512`, `neon`): speed only.
    #[serde(default)]
    pub kernel_level: String,
    pub target_arch: String,
    pub target_os: String,
    /// CPU features as detected at run time (x86: sse4.1, avx, avx2, fma, avx512f ...), for the
    /// record: they choose the dispatch level, which changes no bit.
    pub cpu_features: Vec<String>,
    pub libc: String,
    /// Threads each run computed with: always 1 before tabcard 0.11, which no longer writes it.
    /// A run's products may now be split across threads; how many is speed only, recorded in
    /// the timing records (outside every list), so that this record is the same at any `--jobs`.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threads_per_run: Option<usize>,
}

impl NumericsFingerprint {
    /// Whether results computed under `self` are promised to be bit-identical to results
    /// computed under `other`: the same tool version and kernel version.
    pub fn promises_same_bits_as(&self, other: &NumericsFingerprint) -> bool {
        self.tool_version == other.tool_version && !self.kernel_version.is_empty() && self.kernel_version == other.kernel_version
    }
}

fn cpu_features() -> Vec<String> {
    #[allow(unused_mut)]
    let mut out: Vec<String> = Vec::new();
    #[cfg(target_arch = "x86_64")]
    {
        macro_rules! probe {
            ($($f:tt),*) => {$(
                if std::is_x86_feature_detected!($f) { out.push($f.to_string()); }
            )*};
        }
        probe!("sse4.1", "sse4.2", "avx", "avx2", "fma", "f16c", "avx512f", "avx512bw", "avx512dq", "avx512vl", "sha");
    }
    #[cfg(target_arch = "aarch64")]
    {
        macro_rules! probe {
            ($($f:tt),*) => {$(
                if std::arch::is_aarch64_feature_detected!($f) { out.push($f.to_string()); }
            )*};
        }
        probe!("neon", "fp16", "sve");
    }
    out
}

fn libc_version() -> String {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        extern "C" {
            fn gnu_get_libc_version() -> *const std::ffi::c_char;
        }
        // SAFETY: glibc returns a pointer to a static NUL-terminated string.
        let v = unsafe { std::ffi::CStr::from_ptr(gnu_get_libc_version()) };
        return format!("glibc {}", v.to_string_lossy());
    }
    #[allow(unreachable_code)]
    std::env::consts::OS.to_string()
}

/// The numerics fingerprint of this process; an error when `TABCARD_KERNEL` names a level this
/// build or CPU cannot run.
pub fn current() -> Result<NumericsFingerprint> {
    Ok(NumericsFingerprint {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        tool_commit: env!("TABCARD_SOURCE_COMMIT").to_string(),
        candle_version: CANDLE_VERSION.to_string(),
        kernel_version: KERNEL_VERSION.to_string(),
        kernel_features: KERNEL_FEATURES.to_string(),
        kernel_level: Level::active()?.name().to_string(),
        target_arch: std::env::consts::ARCH.to_string(),
        target_os: std::env::consts::OS.to_string(),
        cpu_features: cpu_features(),
        libc: libc_version(),
        threads_per_run: None,
    })
}

#[cfg(test)]
mod tests {
    #[test]
    fn recorded_candle_version_matches_the_lock_file() {
        let lock = include_str!("../Cargo.lock");
        let entry = lock.split("[[package]]").find(|p| p.contains("name = \"candle-core\"")).unwrap();
        assert!(entry.contains(&format!("version = \"{}\"", super::CANDLE_VERSION)), "{entry}");
    }
}
