//! Thread pools for work whose results do not depend on how many threads share it: runs (each on
//! a worker, its products split across the pool's idle threads by `nn/spread.rs`), the first pass
//! over the data, bootstrap resamples. The process-wide rayon pool stays single-threaded
//! (`numerics::prepare_process`), so such work runs on a pool of its own.

use std::sync::Mutex;

use std::sync::atomic::{AtomicUsize, Ordering};

use crate::error::{Error, Result};

/// The most threads any helper pool may start (`usize::MAX` until [`limit_to`] is called).
static LIMIT: AtomicUsize = AtomicUsize::new(usize::MAX);

/// Caps every later helper pool at `threads` (the command's `--jobs`): a resource limit only, it
/// changes no result.
pub fn limit_to(threads: usize) {
    LIMIT.store(threads.max(1), Ordering::Relaxed);
}

/// The threads the process may use at once: the cores, capped by [`limit_to`].
pub fn allowed() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get()).min(LIMIT.load(Ordering::Relaxed)).max(1)
}

/// The share of the memory still available that a helper pool's working copies may take.
const HELPER_MEMORY_SHARE: u64 = 4;

/// A pool of as many threads as the process may use (the cores, capped by [`limit_to`]), as long
/// as their working memory, `bytes_per_thread` each, stays within a quarter of the memory still
/// available ([`crate::memory::available_bytes`]; no memory cap where the system does not say);
/// `what` names the work in the error when threads cannot start.
pub fn helper_pool(bytes_per_thread: u64, what: &str) -> Result<rayon::ThreadPool> {
    let by_memory = crate::memory::available_bytes()
        .map_or(usize::MAX, |bytes| usize::try_from(bytes / HELPER_MEMORY_SHARE / bytes_per_thread.max(1)).unwrap_or(usize::MAX));
    let threads = allowed().min(by_memory).max(1);
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| Error::Environment(format!("cannot start {threads} threads to {what}: {e}")))
}

/// Environment variable that lifts the cores cap of [`workers`] (never the runs cap): for tests
/// that must run more workers than this machine has cores, e.g. 4 workers on 2 cores to show that
/// the worker count changes no bit.
pub const OVERSUBSCRIBE_ENV: &str = "TABCARD_TEST_OVERSUBSCRIBE";

/// Environment variable (tests only): the sweep trains one run at a time on all its threads, so
/// that a test sees one run's work split across 2, 3 or 4 threads.
pub const ONE_RUN_AT_A_TIME_ENV: &str = "TABCARD_TEST_ONE_RUN_AT_A_TIME";

/// Runs in flight for `workers` workers: 1 under [`ONE_RUN_AT_A_TIME_ENV`], else `workers`.
pub fn runs_in_flight(workers: usize) -> usize {
    if std::env::var_os(ONE_RUN_AT_A_TIME_ENV).is_some() {
        1
    } else {
        workers
    }
}

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

/// `work(item)` for every item, on a pool of `threads` threads of which `workers` take items one
/// after another from a shared queue (at most `workers` items in flight); the other threads, and
/// each worker once the queue is empty, take the pieces the items split their computation into.
/// Results come back in the items' order. A worker only ever starts an item from its own loop, never
/// while waiting for a piece (the loops are broadcast to the threads, not queued as stealable jobs),
/// so an item in flight is never held up behind a whole other item.
pub fn each_on_workers<I: Sync, R: Send>(threads: usize, workers: usize, items: &[I], work: impl Fn(&I) -> R + Sync) -> Result<Vec<R>> {
    let threads = threads.max(workers).max(1);
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|e| Error::Environment(format!("cannot start {threads} worker threads: {e}; try a smaller --jobs")))?;
    let next = std::sync::atomic::AtomicUsize::new(0);
    let done: Mutex<Vec<(usize, R)>> = Mutex::new(Vec::with_capacity(items.len()));
    pool.broadcast(|context| {
        if context.index() >= workers.max(1) {
            return;
        }
        loop {
            let i = next.fetch_add(1, Ordering::Relaxed);
            let Some(item) = items.get(i) else { break };
            let result = work(item);
            done.lock().unwrap_or_else(|poisoned| poisoned.into_inner()).push((i, result));
        }
    });
    let mut done = done.into_inner().unwrap_or_else(|poisoned| poisoned.into_inner());
    done.sort_by_key(|(i, _)| *i);
    Ok(done.into_iter().map(|(_, r)| r).collect())
}

/// One working value per thread of the current rayon pool, made once each (a model to score with,
/// a copy of rows to change), for work that the pool's threads take an item at a time. Which
/// thread takes which item never shows in a result: each item leaves its thread's value as it
/// found it, or the value does not enter the result (a model's scratch buffers).
pub struct PerThread<T> {
    slots: Vec<Mutex<Option<T>>>,
}

impl<T> PerThread<T> {
    /// Empty slots for the threads of the current pool (one off any pool); each is made on first use.
    pub fn new() -> Self {
        PerThread { slots: (0..rayon::current_num_threads().max(1)).map(|_| Mutex::new(None)).collect() }
    }

    /// `work` on this thread's value, made by `make` on its first use. A thread that reaches here
    /// again while its value is in use (work nested in work) gets a fresh value of its own.
    pub fn with<R>(&self, make: impl Fn() -> T, work: impl FnOnce(&mut T) -> R) -> R {
        let slot = &self.slots[rayon::current_thread_index().unwrap_or(0) % self.slots.len()];
        match slot.try_lock() {
            Ok(mut held) => work(held.get_or_insert_with(make)),
            Err(_) => work(&mut make()),
        }
    }
}

impl<T> Default for PerThread<T> {
    fn default() -> Self {
        PerThread::new()
    }
}

#[cfg(test)]
mod worker_tests {
    use super::*;

    #[test]
    fn each_thread_makes_its_value_once_and_work_nested_in_work_gets_its_own() {
        use rayon::prelude::*;
        let made = std::sync::atomic::AtomicUsize::new(0);
        let make = || {
            made.fetch_add(1, Ordering::SeqCst);
            Vec::<usize>::new()
        };
        let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().unwrap();
        let sums: Vec<usize> = pool.install(|| {
            let values = PerThread::new();
            (0..200usize)
                .into_par_iter()
                .with_max_len(1)
                .map(|i| {
                    values.with(make, |v| {
                        v.push(i);
                        let sum = v.iter().sum::<usize>();
                        v.pop();
                        sum
                    })
                })
                .collect()
        });
        assert_eq!(sums, (0..200).collect::<Vec<_>>(), "each item found its thread's value as the last left it");
        assert!(made.load(Ordering::SeqCst) <= 3, "{} values made for 3 threads", made.load(Ordering::SeqCst));
        let values = PerThread::new();
        let nested = values.with(|| 1, |outer| values.with(|| 10, |inner| *outer + *inner));
        assert_eq!(nested, 11, "the inner call got a fresh value rather than waiting on its own");
    }

    #[test]
    fn workers_are_capped_by_runs_and_cores_and_zero_is_refused() {
        let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
        assert!(workers(0, 5).is_err());
        assert_eq!(workers(100_000, 3).unwrap(), 3.min(cores));
        assert_eq!(workers(100_000, 100_000).unwrap(), cores.min(MAX_WORKERS));
        assert_eq!(workers(1, 0).unwrap(), 1);
    }

    #[test]
    fn items_come_back_in_order_with_at_most_the_workers_in_flight() {
        let in_flight = std::sync::atomic::AtomicUsize::new(0);
        let most = std::sync::atomic::AtomicUsize::new(0);
        let items: Vec<usize> = (0..40).collect();
        let out = each_on_workers(4, 2, &items, |&i| {
            let now = in_flight.fetch_add(1, Ordering::SeqCst) + 1;
            most.fetch_max(now, Ordering::SeqCst);
            std::thread::sleep(std::time::Duration::from_millis(1));
            in_flight.fetch_sub(1, Ordering::SeqCst);
            i * 10
        })
        .unwrap();
        assert_eq!(out, items.iter().map(|i| i * 10).collect::<Vec<_>>());
        assert!(most.load(Ordering::SeqCst) <= 2);
    }
}
