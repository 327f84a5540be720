//! Thread pools for work whose results do not depend on how many threads share it (the first pass
//! over the data, bootstrap resamples). The process-wide rayon pool stays single-threaded for the
//! training kernels (`numerics::prepare_process`), so such work runs on a pool of its own.

use crate::error::{Error, Result};

/// A pool of as many threads as the process may use, at most `max` (each thread's working memory
/// is the caller's reason for a cap); `what` names the work in the error when threads cannot start.
pub fn helper_pool(max: usize, what: &str) -> Result<rayon::ThreadPool> {
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get()).clamp(1, max.max(1));
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| Error::Environment(format!("cannot start {threads} threads to {what}: {e}")))
}
