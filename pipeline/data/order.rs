//! Order statistics and sums over one column's values without sorting them: quantiles by
//! selection (the same values, bit for bit, as numpy's "linear" quantile of the sorted values),
//! exact distinct counts by hashing, and compensated sums.

use std::collections::HashSet;
use std::hash::{BuildHasherDefault, Hasher};

/// The `q` quantile (linear interpolation, as [`crate::metrics::bootstrap::quantile_sorted`] on
/// the values sorted by `f64::total_cmp`), found by radix selection in linear time
/// (`metrics::order_statistics`); `values` must not be empty.
pub(crate) fn quantile(values: &[f64], q: f64) -> f64 {
    quantiles(values, [q])[0]
}

/// Several quantiles at once (as [`quantile`] gives each), from one selection of the order
/// statistics they need.
pub(crate) fn quantiles<const K: usize>(values: &[f64], qs: [f64; K]) -> [f64; K] {
    let found = crate::metrics::order_statistics::linear_quantiles(values, &qs);
    std::array::from_fn(|i| found[i])
}

/// The least and greatest values by `f64::total_cmp` (so -0.0 is below 0.0, as a sort puts it).
pub(crate) fn min_max(values: &[f64]) -> Option<(f64, f64)> {
    let min = values.iter().copied().min_by(f64::total_cmp)?;
    let max = values.iter().copied().max_by(f64::total_cmp)?;
    Some((min, max))
}

/// A multiply-and-fold hasher for integer keys: far faster than the default SipHash, and keys are
/// values from the data or SHA-256 digests, not from an adversary who could gain by colliding them.
#[derive(Default)]
pub(crate) struct FoldHasher(u64);

/// A hash set with [`FoldHasher`].
pub(crate) type FastSet<T> = HashSet<T, BuildHasherDefault<FoldHasher>>;
/// A hash map with [`FoldHasher`].
pub(crate) type FastMap<K, V> = std::collections::HashMap<K, V, BuildHasherDefault<FoldHasher>>;

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
        self.0 = self.0.rotate_left(23) ^ x;
    }

    fn write_u128(&mut self, x: u128) {
        self.write_u64(x as u64);
        self.write_u64((x >> 64) as u64);
    }

    fn write_i64(&mut self, x: i64) {
        self.write_u64(x as u64);
    }
}

/// MurmurHash3's 64-bit finaliser: a bijection, so distinct inputs stay distinct, with every
/// output bit depending on every input bit.
fn mix(mut x: u64) -> u64 {
    x ^= x >> 33;
    x = x.wrapping_mul(0xff51_afd7_ed55_8ccd);
    x ^= x >> 33;
    x = x.wrapping_mul(0xc4ce_b9fe_1a85_ec53);
    x ^ (x >> 33)
}

/// Distinct values as a sort-and-dedup would count them: `-0.0` equals `0.0`, and every NaN is
/// distinct (NaN != NaN). Exact, without a sort: the values' mixed bits are partitioned by their
/// top byte into 256 buckets, and each bucket is counted in a hash set small enough to stay in
/// cache (one set over millions of values spent most of its time waiting on memory). Costs 16
/// bytes a value.
pub(crate) fn distinct(values: &[f64]) -> usize {
    let nans = values.iter().filter(|x| x.is_nan()).count();
    let keys = values.iter().filter(|x| !x.is_nan()).map(|&x| mix((x + 0.0).to_bits()));
    let count_in = |set: &mut FastSet<u64>, bucket: &mut dyn Iterator<Item = u64>| {
        set.clear();
        set.extend(bucket);
        set.len()
    };
    let mut set = FastSet::default();
    if values.len() <= 1 << 16 {
        return nans + count_in(&mut set, &mut keys.clone());
    }
    let mut starts = [0usize; 257];
    for k in keys.clone() {
        starts[(k >> 56) as usize + 1] += 1;
    }
    for b in 0..256 {
        starts[b + 1] += starts[b];
    }
    let mut next = starts;
    let mut partitioned = vec![0u64; starts[256]];
    for k in keys {
        let b = (k >> 56) as usize;
        partitioned[next[b]] = k;
        next[b] += 1;
    }
    nans + (0..256).map(|b| count_in(&mut set, &mut partitioned[starts[b]..starts[b + 1]].iter().copied())).sum::<usize>()
}

/// The sum by Neumaier's compensated summation, in the order given: its error does not grow with
/// the number of values (Neumaier 1974), so a mean over ten million rows keeps its digits.
pub(crate) fn sum(values: impl IntoIterator<Item = f64>) -> f64 {
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
                assert_eq!(quantile(&values, q).to_bits(), quantile_sorted(&sorted, q).to_bits(), "n = {n}, q = {q}");
            }
            let many = quantiles(&values, [0.0, 0.25, 0.5, 0.75, 1.0]);
            for (q, got) in [0.0, 0.25, 0.5, 0.75, 1.0].iter().zip(many) {
                assert_eq!(got.to_bits(), quantile_sorted(&sorted, *q).to_bits(), "n = {n}, q = {q}, at once");
            }
            let (lo, hi) = min_max(&values).unwrap();
            assert_eq!((lo.to_bits(), hi.to_bits()), (sorted[0].to_bits(), sorted[n - 1].to_bits()));
        }
    }

    #[test]
    fn distinct_counts_as_sort_and_dedup() {
        for n in [0usize, 1, 5, 1000, 200_000] {
            let mut values = sample(n, 7);
            // Repeats, so the count is not simply the length.
            values.extend_from_within(..n / 3);
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
