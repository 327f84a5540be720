//! What the bits of a trained model depend on, and keeping each run's arithmetic single-threaded.
//!
//! candle's CPU matrix multiply (the `gemm` crate) picks its kernel at run time from the CPU's
//! features and derives its k-blocking from the cache sizes, and exp/log/tanh come from the
//! platform's libm. So identical bits are promised for identical inputs on the same *numerics
//! fingerprint* (recorded with every run), not across different CPUs.

use serde::{Deserialize, Serialize};
use std::sync::Once;

/// Candle's version as locked in Cargo.lock (kept in step by a test).
pub const CANDLE_VERSION: &str = "0.11.1";

/// The crate features that select numerical kernels, as this build compiles them: candle-core with
/// its default (CPU) features and gemm with its `x86-v4` (AVX-512) kernels, so gemm picks among
/// its scalar, FMA/AVX2 and AVX-512 paths at run time from the CPU's features. The training
/// engine (`nn/engine.rs`) and candle's evaluation both multiply through this gemm.
pub const KERNEL_FEATURES: &str = "candle-core default features; gemm 0.19 with x86-v4 (AVX-512 kernels where the CPU has avx512f); training engine nn/engine.rs v1";

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
    pub kernel_features: String,
    pub target_arch: String,
    pub target_os: String,
    /// CPU features that select kernels in gemm and in the compiler's code (x86: sse4.1, avx,
    /// avx2, fma, avx512f ...), as detected at run time.
    pub cpu_features: Vec<String>,
    /// Data-cache sizes in bytes (L1d, L2, L3) as the OS reports them; gemm's blocking uses them.
    pub cache_bytes: Vec<u64>,
    pub libc: String,
    /// Threads each run computes with (always 1).
    pub threads_per_run: usize,
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

fn cache_sizes() -> Vec<u64> {
    let mut out = Vec::new();
    for index in 0..8 {
        let base = format!("/sys/devices/system/cpu/cpu0/cache/index{index}");
        let Ok(kind) = std::fs::read_to_string(format!("{base}/type")) else { break };
        if kind.trim() == "Instruction" {
            continue;
        }
        if let Ok(size) = std::fs::read_to_string(format!("{base}/size")) {
            let s = size.trim();
            let (digits, unit) = s.split_at(s.find(|c: char| !c.is_ascii_digit()).unwrap_or(s.len()));
            let n: u64 = digits.parse().unwrap_or(0);
            out.push(match unit {
                "K" => n * 1024,
                "M" => n * 1024 * 1024,
                _ => n,
            });
        }
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

/// The numerics fingerprint of this process.
pub fn current() -> NumericsFingerprint {
    NumericsFingerprint {
        tool_version: env!("CARGO_PKG_VERSION").to_string(),
        tool_commit: env!("TABCARD_SOURCE_COMMIT").to_string(),
        candle_version: CANDLE_VERSION.to_string(),
        kernel_features: KERNEL_FEATURES.to_string(),
        target_arch: std::env::consts::ARCH.to_string(),
        target_os: std::env::consts::OS.to_string(),
        cpu_features: cpu_features(),
        cache_bytes: cache_sizes(),
        libc: libc_version(),
        threads_per_run: 1,
    }
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
