//! Order statistics and sums over one column's values without sorting them: quantiles by
//! selection (the same values, bit for bit, as numpy's "linear" quantile of the sorted values),
//! exact distinct counts by hashing, and compensated sums.

use std::collections::HashSet;
use std::hash::{BuildHasherDefault, Hasher};

/// The `q` quantile (linear interpolation, as [`crate::metrics::bootstrap::quantile_sorted`] on
/// the values sorted by `f64::total_cmp`), found by selection in linear time; reorders `values`,
/// which must not be empty.
pub fn quantile(values: &mut [f64], q: f64) -> f64 {
    let pos = q * (values.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let (_, &mut below, above) = values.select_nth_unstable_by(lo, f64::total_cmp);
    let next = if pos.ceil() as usize > lo { above.iter().copied().min_by(f64::total_cmp).unwrap_or(below) } else { below };
    // The same arithmetic as quantile_sorted, so infinities and -0.0 come out as they did.
    below + (next - below) * (pos - lo as f64)
}

/// The least and greatest values by `f64::total_cmp` (so -0.0 is below 0.0, as a sort puts it).
pub fn min_max(values: &[f64]) -> Option<(f64, f64)> {
    let min = values.iter().copied().min_by(f64::total_cmp)?;
    let max = values.iter().copied().max_by(f64::total_cmp)?;
    Some((min, max))
}

/// A multiply-and-fold hasher for 64-bit keys: far faster than the default SipHash, and keys are
/// values from the data, not from an adversary who could gain by colliding them.
#[derive(Default)]
struct FoldHasher(u64);

impl Hasher for FoldHasher {
    fn finish(&self) -> u64 {
        let x = (self.0 as u128).wrapping_mul(0x9E37_79B9_7F4A_7C15_F39C_C060_5CED_C835);
        (x >> 64) as u64 ^ x as u64
    }

    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0.rotate_left(8) ^ u64::from(b)).wrapping_mul(0x100_0000_01B3);
        }
    }

    fn write_u64(&mut self, x: u64) {
        self.0 ^= x;
    }
}

/// Distinct values as a sort-and-dedup would count them: `-0.0` equals `0.0`, and every NaN is
/// distinct (NaN != NaN). Exact; memory grows with the number of distinct values, not rows.
pub fn distinct(values: &[f64]) -> usize {
    let mut seen: HashSet<u64, BuildHasherDefault<FoldHasher>> = HashSet::default();
    let mut nans = 0;
    for &x in values {
        if x.is_nan() {
            nans += 1;
        } else {
            seen.insert((x + 0.0).to_bits());
        }
    }
    seen.len() + nans
}

/// The sum by Neumaier's compensated summation, in the order given: its error does not grow with
/// the number of values (Neumaier 1974), so a mean over ten million rows keeps its digits.
pub fn sum(values: impl IntoIterator<Item = f64>) -> f64 {
    let (mut s, mut c) = (0.0f64, 0.0f64);
    for x in values {
        let t = s + x;
        c += if s.abs() >= x.abs() { (s - t) + x } else { (x - t) + s };
        s = t;
    }
    s + c
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::metrics::bootstrap::quantile_sorted;

    fn sample(n: usize, seed: u64) -> Vec<f64> {
        let mut s = crate::rng::Stream::new(seed, crate::rng::Purpose::DemoData);
        (0..n)
            .map(|i| match i % 9 {
                0 => 0.5,
                3 => -0.0,
                5 => 0.0,
                7 => f64::INFINITY,
                _ => s.normal(),
            })
            .collect()
    }

    #[test]
    fn selection_gives_the_sorted_quantiles_bit_for_bit() {
        for n in [1usize, 2, 3, 4, 10, 11, 1000, 1001] {
            let values = sample(n, n as u64);
            let mut sorted = values.clone();
            sorted.sort_by(f64::total_cmp);
            for q in [0.0, 0.25, 0.5, 0.75, 1.0] {
                let mut work = values.clone();
                assert_eq!(quantile(&mut work, q).to_bits(), quantile_sorted(&sorted, q).to_bits(), "n = {n}, q = {q}");
            }
            let (lo, hi) = min_max(&values).unwrap();
            assert_eq!((lo.to_bits(), hi.to_bits()), (sorted[0].to_bits(), sorted[n - 1].to_bits()));
        }
    }

    #[test]
    fn distinct_counts_as_sort_and_dedup() {
        for n in [0usize, 1, 5, 1000] {
            let mut values = sample(n, 7);
            values.extend([f64::NAN, f64::NAN, -0.0]);
            let mut sorted = values.clone();
            sorted.sort_by(f64::total_cmp);
            let runs = 1 + sorted.windows(2).filter(|w| w[0] != w[1]).count();
            assert_eq!(distinct(&values), runs, "n = {n}");
        }
    }

    #[test]
    fn compensated_sum_keeps_what_a_plain_sum_loses() {
        // 1 + 1e-16 added ten million times: a plain sum never moves off 1.
        let values = std::iter::once(1.0).chain(std::iter::repeat_n(1e-16, 10_000_000));
        let s = sum(values);
        assert!((s - (1.0 + 1e-9)).abs() < 1e-15, "{s}");
        assert_eq!(sum([0.1, 0.2, 0.3]), 0.6);
    }
}
