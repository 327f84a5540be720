//! Seeded, portable random streams. Every random draw in tabcard (splits, initialisation, shuffling,
//! dropout masks, input noise, bootstrap resamples) comes from a [`Stream`] derived from a seed and a
//! named purpose, so that streams are independent of each other and of thread scheduling. The
//! generator is ChaCha20 (whose output is fixed by its specification), and the conversions from bits
//! to numbers are our own, so the same seed gives the same numbers on every platform and version.

use rand_chacha::ChaCha20Rng;
use rand_core::{RngCore, SeedableRng};
use sha2::{Digest, Sha256};

/// What a stream is used for; each purpose gets its own independent stream for a given seed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Purpose {
    Split,
    Init,
    Shuffle,
    Dropout,
    InputNoise,
    Bootstrap,
    DemoData,
    /// Resampling rows within each group for the disparity intervals.
    GroupBootstrap,
    /// Permuting a feature's values across test rows, and the resamples its importance is judged on.
    Permutation,
    /// The sample of test rows the heavier analyses after training compute on (`analysis/sample.rs`).
    AnalysisRows,
    /// The sample of training rows the threshold reference row is chosen from (`analysis/sample.rs`).
    ReferenceRows,
}

impl Purpose {
    fn label(self) -> &'static str {
        match self {
            Purpose::Split => "split",
            Purpose::Init => "init",
            Purpose::Shuffle => "shuffle",
            Purpose::Dropout => "dropout",
            Purpose::InputNoise => "input-noise",
            Purpose::Bootstrap => "bootstrap",
            Purpose::DemoData => "demo-data",
            Purpose::GroupBootstrap => "group-bootstrap",
            Purpose::Permutation => "permutation",
            Purpose::AnalysisRows => "analysis-rows",
            Purpose::ReferenceRows => "reference-rows",
        }
    }
}

/// One seeded random stream.
pub struct Stream {
    rng: ChaCha20Rng,
    spare_normal: Option<f64>,
}

impl Stream {
    /// The stream for `(seed, purpose)`: its key is SHA-256 of a fixed label, the seed and the purpose.
    pub fn new(seed: u64, purpose: Purpose) -> Self {
        let mut hasher = Sha256::new();
        hasher.update(b"tabcard-stream-v1\0");
        hasher.update(seed.to_le_bytes());
        hasher.update(purpose.label().as_bytes());
        let key: [u8; 32] = hasher.finalize().into();
        Stream { rng: ChaCha20Rng::from_seed(key), spare_normal: None }
    }

    pub fn next_u32(&mut self) -> u32 {
        self.rng.next_u32()
    }

    pub fn next_u64(&mut self) -> u64 {
        self.rng.next_u64()
    }

    /// The next `out.len()` 32-bit draws, the same values as that many [`Stream::next_u32`] calls.
    pub fn fill_u32(&mut self, out: &mut [u32]) {
        for v in out {
            *v = self.rng.next_u32();
        }
    }

    /// Uniform on [0, 1) with 53 random bits.
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform f32 on [0, 1) with 24 random bits.
    pub fn uniform_f32(&mut self) -> f32 {
        (self.next_u32() >> 8) as f32 * (1.0 / (1u32 << 24) as f32)
    }

    /// Uniform integer in `0..n` without modulo bias (rejection sampling). `n` must be positive.
    pub fn below(&mut self, n: u64) -> u64 {
        debug_assert!(n > 0);
        let zone = u64::MAX - (u64::MAX % n);
        loop {
            let x = self.next_u64();
            if x < zone {
                return x % n;
            }
        }
    }

    /// Fills `out` with draws of [`Stream::below`]`(n)`: the same values, the rejection zone
    /// computed once. Returns how many 64-bit draws were rejected on the way (each draw takes two
    /// 32-bit words of the stream).
    pub fn fill_below(&mut self, n: u64, out: &mut [usize]) -> u64 {
        debug_assert!(n > 0);
        let zone = u64::MAX - (u64::MAX % n);
        let mut rejected = 0;
        for v in out {
            *v = loop {
                let x = self.next_u64();
                if x < zone {
                    break (x % n) as usize;
                }
                rejected += 1;
            };
        }
        rejected
    }

    /// How far the stream has gone, in 32-bit words from its start.
    pub fn word_position(&self) -> u128 {
        self.rng.get_word_pos()
    }

    /// This stream as it stands `position` 32-bit words from its start, so that a later part of
    /// it can be drawn on another thread: the same values as drawing up to there.
    pub fn at_word(&self, position: u128) -> Stream {
        let mut rng = self.rng.clone();
        rng.set_word_pos(position);
        Stream { rng, spare_normal: None }
    }

    /// Moves this stream to `position` 32-bit words from its start.
    pub fn seek_word(&mut self, position: u128) {
        self.rng.set_word_pos(position);
        self.spare_normal = None;
    }

    /// Standard normal draw (Box-Muller with the pure-Rust `libm`, so it is the same everywhere).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare_normal.take() {
            return z;
        }
        let u1 = 1.0 - self.uniform(); // in (0, 1]
        let u2 = self.uniform();
        let radius = libm::sqrt(-2.0 * libm::log(u1));
        let angle = 2.0 * std::f64::consts::PI * u2;
        self.spare_normal = Some(radius * libm::sin(angle));
        radius * libm::cos(angle)
    }

    /// Fisher-Yates shuffle in place.
    pub fn shuffle<T>(&mut self, items: &mut [T]) {
        for i in (1..items.len()).rev() {
            let j = self.below(i as u64 + 1) as usize;
            items.swap(i, j);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn same_seed_same_purpose_same_numbers() {
        let a: Vec<u64> = (0..8)
            .map({
                let mut s = Stream::new(7, Purpose::Init);
                move |_| s.next_u64()
            })
            .collect();
        let b: Vec<u64> = (0..8)
            .map({
                let mut s = Stream::new(7, Purpose::Init);
                move |_| s.next_u64()
            })
            .collect();
        assert_eq!(a, b);
    }

    #[test]
    fn purposes_and_seeds_are_independent_streams() {
        let first = |seed, p| Stream::new(seed, p).next_u64();
        assert_ne!(first(7, Purpose::Init), first(7, Purpose::Shuffle));
        assert_ne!(first(7, Purpose::Init), first(8, Purpose::Init));
    }

    #[test]
    fn a_stream_taken_up_at_a_word_draws_what_follows_there() {
        // Below 2^63 + 1 about half of all 64-bit draws are rejected.
        let n = (1u64 << 63) + 1;
        let mut whole = Stream::new(5, Purpose::Bootstrap);
        let mut first = vec![0usize; 333];
        let rejected = whole.fill_below(n, &mut first);
        assert!(rejected > 100, "{rejected} rejected");
        assert_eq!(whole.word_position(), 2 * (333 + u128::from(rejected)), "two words a draw, rejected or not");
        let mut resumed = Stream::new(5, Purpose::Bootstrap).at_word(whole.word_position());
        let mut sought = Stream::new(5, Purpose::Bootstrap);
        sought.seek_word(whole.word_position());
        for _ in 0..100 {
            let v = whole.next_u64();
            assert_eq!((resumed.next_u64(), sought.next_u64()), (v, v));
        }
        // An odd word: a 64-bit draw across the generator's blocks.
        let mut whole = Stream::new(5, Purpose::Bootstrap);
        for _ in 0..63 {
            whole.next_u32();
        }
        let mut resumed = Stream::new(5, Purpose::Bootstrap).at_word(63);
        assert_eq!(resumed.next_u64(), whole.next_u64());
    }

    #[test]
    fn filled_draws_are_the_draws_one_at_a_time() {
        let (mut a, mut b) = (Stream::new(3, Purpose::Bootstrap), Stream::new(3, Purpose::Bootstrap));
        for n in [1u64, 2, 7, 1 << 40, u64::MAX / 3 + 7] {
            let mut filled = vec![0usize; 500];
            a.fill_below(n, &mut filled);
            let single: Vec<usize> = (0..500).map(|_| b.below(n) as usize).collect();
            assert_eq!(filled, single, "n = {n}");
        }
    }

    #[test]
    fn below_covers_range_without_bias() {
        let mut s = Stream::new(1, Purpose::Shuffle);
        let mut counts = [0usize; 6];
        for _ in 0..60_000 {
            counts[s.below(6) as usize] += 1;
        }
        // Each face expects 10,000; 5 standard deviations is about 456.
        for c in counts {
            assert!((c as i64 - 10_000).abs() < 460, "{counts:?}");
        }
    }

    #[test]
    fn normal_has_unit_moments() {
        let mut s = Stream::new(3, Purpose::InputNoise);
        let n = 200_000;
        let draws: Vec<f64> = (0..n).map(|_| s.normal()).collect();
        let mean = draws.iter().sum::<f64>() / n as f64;
        let var = draws.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n as f64;
        // Standard error of the mean is 1/sqrt(n) ~ 0.0022; of the variance sqrt(2/n) ~ 0.0032.
        assert!(mean.abs() < 0.011, "mean {mean}");
        assert!((var - 1.0).abs() < 0.016, "var {var}");
    }
}
