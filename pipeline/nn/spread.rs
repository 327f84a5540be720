//! How one run's work is split across the threads of the pool it runs in. A matrix product is cut
//! into bands of output rows (or columns), an element-wise pass into stretches of elements; each
//! output value is computed whole inside one piece, in the same order as on one thread, so the
//! pieces, their number and the threads that take them change no bit. Pieces go to the run's
//! rayon pool as ordinary jobs: a worker with no run of its own takes them, and a worker busy with
//! another run leaves them to their owner, so runs in flight share the cores without any
//! scheduling of their own. Reductions (the loss, the gradient norm, batch-norm statistics, bias
//! gradients, metrics) are not split: they run on the run's own thread in their fixed order.

use std::sync::atomic::{AtomicU64, Ordering};

use rayon::iter::{IndexedParallelIterator, ParallelIterator};

/// The least work, in multiply-adds or element updates, worth a piece of its own: below it, handing
/// a piece to another thread costs about what it saves. A speed setting only.
pub const PIECE_WORK: usize = 1 << 13;

/// Environment variable (tests only): split every product and pass however small, so that the
/// small networks of the test suite exercise the split.
pub const SPLIT_SMALL_ENV: &str = "TABCARD_TEST_SPLIT_SMALL";

/// [`PIECE_WORK`], or 1 under [`SPLIT_SMALL_ENV`]; read once.
pub(super) fn piece_work() -> usize {
    static WORK: std::sync::OnceLock<usize> = std::sync::OnceLock::new();
    *WORK.get_or_init(|| if std::env::var_os(SPLIT_SMALL_ENV).is_some() { 1 } else { PIECE_WORK })
}

/// The split of one engine's work: at most `parts` pieces per pass, and the threads that took one.
pub struct Spread {
    parts: usize,
    /// Bit i set: the pool thread of index i (mod 64) computed a piece.
    taken: AtomicU64,
    /// Tests only: pieces started so far and how many must start before any proceeds, so that each
    /// piece of a pass is held by a thread of its own.
    #[cfg(test)]
    rendezvous: Option<(std::sync::atomic::AtomicUsize, usize)>,
}

impl Clone for Spread {
    /// A spread of as many pieces, no thread yet noted.
    fn clone(&self) -> Self {
        Spread::new(self.parts)
    }
}

impl Spread {
    /// At most `threads` pieces per pass (at least 1).
    pub fn new(threads: usize) -> Self {
        Spread {
            parts: threads.max(1),
            taken: AtomicU64::new(0),
            #[cfg(test)]
            rendezvous: None,
        }
    }

    /// The most pieces a pass is split into.
    pub fn parts(&self) -> usize {
        self.parts
    }

    /// The length of each band when `len` units of `work_per_unit` each are split: whole multiples
    /// of `align`, at most [`Spread::parts`] bands, none under [`PIECE_WORK`]; `len` itself (one
    /// piece) when the caller is not on a pool's thread, where a piece would wait for a hand-off.
    pub fn band(&self, len: usize, align: usize, work_per_unit: usize) -> usize {
        if self.parts <= 1 || rayon::current_thread_index().is_none() {
            return len;
        }
        let align = align.max(1);
        let pieces = self.parts.min(len.saturating_mul(work_per_unit) / piece_work()).min(len / align);
        if pieces <= 1 {
            return len;
        }
        len.div_ceil(pieces).next_multiple_of(align)
    }

    /// `work` on each of `pieces`, one rayon job per piece, noting every thread that takes one.
    pub fn each<I: IndexedParallelIterator>(&self, pieces: I, work: impl Fn(I::Item) + Sync + Send) {
        pieces.with_max_len(1).for_each(|piece| {
            self.note_thread();
            work(piece)
        });
    }

    /// Records that the calling thread computes a piece.
    pub fn note_thread(&self) {
        let bit = rayon::current_thread_index().unwrap_or(0) % 64;
        self.taken.fetch_or(1 << bit, Ordering::Relaxed);
        #[cfg(test)]
        if let Some((started, expected)) = &self.rendezvous {
            // A piece waits (at most 10 s) until `expected` pieces have started: the others stay
            // queued meanwhile, so only other threads can take them.
            started.fetch_add(1, Ordering::SeqCst);
            let since = std::time::Instant::now();
            while started.load(Ordering::SeqCst) < *expected && since.elapsed().as_secs() < 10 {
                std::thread::yield_now();
            }
        }
    }

    /// Tests only: the next pass's first `pieces` pieces each wait for the others to start, and
    /// the record of threads that took part starts afresh.
    #[cfg(test)]
    pub(crate) fn meet(&mut self, pieces: usize) {
        self.taken = AtomicU64::new(0);
        self.rendezvous = Some((std::sync::atomic::AtomicUsize::new(0), pieces));
    }

    /// How many threads computed pieces since the engine was built (1 when nothing was split).
    pub fn threads_taken(&self) -> usize {
        (self.taken.load(Ordering::Relaxed).count_ones() as usize).max(1)
    }
}

/// The threads one run may split its work across: the size of the pool it runs on, or 1 off any
/// pool. Speed only; never recorded as evidence.
pub fn threads_here() -> usize {
    if rayon::current_thread_index().is_some() {
        rayon::current_num_threads()
    } else {
        1
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn bands_are_aligned_bounded_and_only_split_on_a_pool() {
        let spread = Spread::new(4);
        assert_eq!(spread.band(1000, 8, 1 << 20), 1000, "off a pool nothing is split");
        let pool = rayon::ThreadPoolBuilder::new().num_threads(2).build().unwrap();
        pool.install(|| {
            assert_eq!(spread.band(1000, 8, 1 << 20), 256);
            assert_eq!(spread.band(1000, 8, PIECE_WORK / 1000), 1000, "too little work for two pieces");
            assert_eq!(spread.band(1000, 8, 2 * PIECE_WORK / 1000 + 1), 504, "work for two pieces, not three");
            assert_eq!(spread.band(12, 8, 1 << 20), 12, "fewer units than two aligned bands");
            for len in 1..300 {
                let band = spread.band(len, 6, 1 << 20);
                assert!(band.is_multiple_of(6) || band == len);
                assert!(len.div_ceil(band) <= 4, "{len}: {band}");
            }
        });
        assert_eq!(Spread::new(1).band(1000, 8, 1 << 20), 1000);
    }
}
