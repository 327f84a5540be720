//! Thread pools for work whose results do not depend on how many threads share it (the first pass
//! over the data, bootstrap resamples). The process-wide rayon pool stays single-threaded for the
//! training kernels (`numerics::prepare_process`), so such work runs on a pool of its own.

use std::sync::atomic::{AtomicUsize, Ordering};

use crate::error::{Error, Result};

/// The most threads any helper pool may start (`usize::MAX` until [`limit_to`] is called).
static LIMIT: AtomicUsize = AtomicUsize::new(usize::MAX);

/// Caps every later helper pool at `threads` (the command's `--jobs`): a resource limit only, it
/// changes no result.
pub fn limit_to(threads: usize) {
    LIMIT.store(threads.max(1), Ordering::Relaxed);
}

/// A pool of as many threads as the process may use, at most `max` (each thread's working memory
/// is the caller's reason for a cap) and at most the [`limit_to`] cap; `what` names the work in
/// the error when threads cannot start.
pub fn helper_pool(max: usize, what: &str) -> Result<rayon::ThreadPool> {
    let available = std::thread::available_parallelism().map_or(1, |n| n.get());
    let threads = available.min(LIMIT.load(Ordering::Relaxed)).clamp(1, max.max(1));
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| Error::Environment(format!("cannot start {threads} threads to {what}: {e}")))
}

/// Environment variable that lifts the cores cap of [`workers`] (never the runs cap): for tests
/// that must run more workers than this machine has cores, e.g. 4 workers on 2 cores to show that
/// the worker count changes no bit.
pub const OVERSUBSCRIBE_ENV: &str = "TABCARD_TEST_OVERSUBSCRIBE";

/// The most worker threads any command starts, whatever it is asked.
pub const MAX_WORKERS: usize = 256;

/// The worker threads a command starts for `runs` runs when `--jobs` asks for `requested`: at
/// least 1, at most the runs, the cores available (unless [`OVERSUBSCRIBE_ENV`] is set) and
/// [`MAX_WORKERS`]. `--jobs 0` is refused.
pub fn workers(requested: usize, runs: usize) -> Result<usize> {
    if requested == 0 {
        return Err(Error::Usage("--jobs 0: at least one worker is needed (default: the cores available)".into()));
    }
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let cores = if std::env::var_os(OVERSUBSCRIBE_ENV).is_some() { MAX_WORKERS } else { cores };
    Ok(requested.min(runs.max(1)).min(cores).min(MAX_WORKERS))
}

#[cfg(test)]
mod worker_tests {
    use super::*;

    #[test]
    fn workers_are_capped_by_runs_and_cores_and_zero_is_refused() {
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
        assert!(workers(0, 5).is_err());
        assert_eq!(workers(100_000, 3).unwrap(), 3.min(cores));
        assert_eq!(workers(100_000, 100_000).unwrap(), cores.min(MAX_WORKERS));
        assert_eq!(workers(1, 0).unwrap(), 1);
    }
}
