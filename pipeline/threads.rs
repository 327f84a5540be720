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
