//! Exact order statistics without a sort: the values a sort under `f64::total_cmp` would put at
//! given ranks, found by radix selection on order-preserving 64-bit keys. A first pass counts the
//! values by their top 16 key bits, a second gathers only the buckets that hold a wanted rank,
//! and each gathered bucket is narrowed 16 bits at a time the same way until it is small enough
//! to sort. So a quantile of millions of values costs two streaming passes instead of a sort, and
//! gives the sort's value bit for bit (the ranks name the same elements). Used for the median
//! reference row, the monitoring profile's deciles and the curves' grids.

use rayon::prelude::*;

/// Buckets of one level: 16 key bits.
const BUCKETS: usize = 1 << 16;

/// A gathered bucket of at most this many keys is sorted rather than narrowed further.
const SORT_AT_MOST: usize = 4096;

/// The key whose unsigned order is `f64::total_cmp`'s order of the values.
fn key(x: f64) -> u64 {
    let bits = x.to_bits();
    if bits >> 63 == 1 {
        !bits
    } else {
        bits | 1 << 63
    }
}

fn value(key: u64) -> f64 {
    f64::from_bits(if key >> 63 == 1 { key & !(1 << 63) } else { !key })
}

/// Series of values, visited the same way each time.
trait Series {
    /// How many series.
    fn len(&self) -> usize;
    /// Calls `visit(series, value)` once per value.
    fn each(&self, visit: impl FnMut(usize, f64));
}

/// One slice.
struct Slice<'a>(&'a [f64]);

impl Series for Slice<'_> {
    fn len(&self) -> usize {
        1
    }
    fn each(&self, mut visit: impl FnMut(usize, f64)) {
        self.0.iter().for_each(|&x| visit(0, x));
    }
}

/// Some columns of a row-major f32 matrix, read a band of rows at a time, one column after
/// another within the band: the band stays in cache while each column's counts do too.
struct Columns<'a> {
    data: &'a [f32],
    cols: usize,
    columns: &'a [usize],
}

impl Series for Columns<'_> {
    fn len(&self) -> usize {
        self.columns.len()
    }
    fn each(&self, mut visit: impl FnMut(usize, f64)) {
        /// Rows of a band: 256 rows of 64 f32 columns are 64 KiB (1,024 rows and 4,096 were slower).
        const BAND_ROWS: usize = 256;
        for band in self.data.chunks(BAND_ROWS * self.cols) {
            for (s, &j) in self.columns.iter().enumerate() {
                for row in band.chunks_exact(self.cols) {
                    visit(s, f64::from(row[j]));
                }
            }
        }
    }
}

/// For each series, the values at `ranks` (each below the series' length; any order, repeats
/// allowed), from two visits: one to count, one to gather.
fn at_ranks(pass: &impl Series, ranks: &[usize]) -> Vec<Vec<f64>> {
    let mut counts = vec![vec![0u64; BUCKETS]; pass.len()];
    pass.each(|s, x| counts[s][(key(x) >> 48) as usize] += 1);
    let plans: Vec<Plan> = counts.iter().map(|c| Plan::new(c, ranks)).collect();
    let mut gathered: Vec<Vec<Vec<u64>>> = plans.iter().map(|p| p.buffers()).collect();
    pass.each(|s, x| {
        let k = key(x);
        let slot = plans[s].slot_of[(k >> 48) as usize];
        if slot != u32::MAX {
            gathered[s][slot as usize].push(k);
        }
    });
    plans.iter().zip(gathered).map(|(plan, mut keys)| plan.resolve(&mut keys, 32).into_iter().map(value).collect()).collect()
}

/// Where the wanted ranks fall among one level's buckets.
struct Plan {
    /// Bucket -> slot of its gathered keys, `u32::MAX` for buckets no rank falls in.
    slot_of: Vec<u32>,
    /// Keys each slot's bucket holds.
    sizes: Vec<usize>,
    /// Per rank asked: (slot, rank inside the slot's bucket).
    placed: Vec<(usize, usize)>,
}

impl Plan {
    fn new(counts: &[u64], ranks: &[usize]) -> Self {
        let mut starts = Vec::with_capacity(BUCKETS);
        let mut total = 0u64;
        for &c in counts {
            starts.push(total);
            total += c;
        }
        let mut slot_of = vec![u32::MAX; BUCKETS];
        let mut sizes = Vec::new();
        let placed = ranks
            .iter()
            .map(|&r| {
                // The last bucket starting at or below the rank: empty buckets start where the
                // next one does, so this is the one holding it.
                let b = starts.partition_point(|&s| s <= r as u64).saturating_sub(1);
                if slot_of[b] == u32::MAX {
                    slot_of[b] = sizes.len() as u32;
                    sizes.push(counts[b] as usize);
                }
                (slot_of[b] as usize, r - starts[b] as usize)
            })
            .collect();
        Plan { slot_of, sizes, placed }
    }

    fn buffers(&self) -> Vec<Vec<u64>> {
        self.sizes.iter().map(|&n| Vec::with_capacity(n)).collect()
    }

    /// The key at each rank asked, each slot's gathered keys narrowed from bit `shift` down.
    fn resolve(&self, gathered: &mut [Vec<u64>], shift: u32) -> Vec<u64> {
        let mut out = vec![0u64; self.placed.len()];
        for (slot, keys) in gathered.iter_mut().enumerate() {
            let at: Vec<usize> = (0..self.placed.len()).filter(|&i| self.placed[i].0 == slot).collect();
            let inside: Vec<usize> = at.iter().map(|&i| self.placed[i].1).collect();
            for (i, v) in at.into_iter().zip(select_keys(keys, shift, &inside)) {
                out[i] = v;
            }
        }
        out
    }
}

/// The keys at `ranks` (within `keys`) of `keys`, all alike above bit `shift + 16`: sorted when
/// few or all equal, else narrowed on the 16 bits from `shift` up.
fn select_keys(keys: &mut [u64], shift: u32, ranks: &[usize]) -> Vec<u64> {
    if keys.len() <= SORT_AT_MOST || keys.iter().all(|&k| k == keys[0]) {
        keys.sort_unstable();
        return ranks.iter().map(|&r| keys[r]).collect();
    }
    let bucket = |k: u64| ((k >> shift) & 0xFFFF) as usize;
    let mut counts = vec![0u64; BUCKETS];
    for &k in keys.iter() {
        counts[bucket(k)] += 1;
    }
    let plan = Plan::new(&counts, ranks);
    let mut gathered = plan.buffers();
    for &k in keys.iter() {
        let slot = plan.slot_of[bucket(k)];
        if slot != u32::MAX {
            gathered[slot as usize].push(k);
        }
    }
    // Below the last 16 bits every key of a bucket is the same value.
    plan.resolve(&mut gathered, shift.saturating_sub(16))
}

/// The values a sort of `values` under `f64::total_cmp` puts at `ranks` (each below
/// `values.len()`).
pub fn values_at_ranks(values: &[f64], ranks: &[usize]) -> Vec<f64> {
    at_ranks(&Slice(values), ranks).pop().unwrap_or_default()
}

/// The `q` quantiles of `values` with linear interpolation, as
/// [`crate::metrics::bootstrap::quantile_sorted`] gives them on the values sorted by
/// `f64::total_cmp` (numpy's "linear" method), bit for bit; `values` must not be empty.
pub fn linear_quantiles(values: &[f64], qs: &[f64]) -> Vec<f64> {
    let last = values.len() - 1;
    let ranks: Vec<usize> = qs.iter().flat_map(|&q| linear_ranks(last, q)).collect();
    let at = values_at_ranks(values, &ranks);
    qs.iter().zip(at.chunks_exact(2)).map(|(&q, pair)| linear_between(last, q, pair[0], pair[1])).collect()
}

/// The two sorted positions the linear `q` quantile of `last + 1` values reads.
pub fn linear_ranks(last: usize, q: f64) -> [usize; 2] {
    let pos = q * last as f64;
    [pos.floor() as usize, (pos.ceil() as usize).min(last)]
}

/// The linear `q` quantile of `last + 1` values from the two it reads ([`linear_ranks`]), with
/// `quantile_sorted`'s arithmetic, so infinities and -0.0 come out as a sort gives them.
pub fn linear_between(last: usize, q: f64, below: f64, above: f64) -> f64 {
    let pos = q * last as f64;
    below + (above - below) * (pos - pos.floor())
}

/// Columns one pass over a matrix's rows serves: 16 f32 values, one cache line of a row.
const COLUMNS_PER_PASS: usize = 16;

/// For each column `j` of `columns` of the row-major `rows x cols` matrix `data`, the values at
/// `ranks` of that column (as f64). Neighbouring columns share a pass over the rows, and the
/// groups run in parallel on the current rayon pool; the values do not depend on the threads.
pub fn column_values_at_ranks(data: &[f32], cols: usize, columns: &[usize], ranks: &[usize]) -> Vec<Vec<f64>> {
    let groups: Vec<&[usize]> = columns.chunks(COLUMNS_PER_PASS).collect();
    let found: Vec<Vec<Vec<f64>>> = groups.par_iter().map(|group| at_ranks(&Columns { data, cols, columns: group }, ranks)).collect();
    found.concat()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rng::{Purpose, Stream};

    fn sorted(values: &[f64]) -> Vec<f64> {
        let mut v = values.to_vec();
        v.sort_by(f64::total_cmp);
        v
    }

    /// Against a full sort, bit for bit: spread values, heavy ties, signed zeros, infinities,
    /// a column of one value, and samples large enough to narrow three levels.
    #[test]
    fn ranks_give_the_sorted_values_bit_for_bit() {
        let mut stream = Stream::new(5, Purpose::Bootstrap);
        let mut cases: Vec<Vec<f64>> = vec![
            vec![3.0],
            vec![-0.0, 0.0, 0.0, -0.0, 1.0, -1.0],
            vec![f64::INFINITY, -f64::INFINITY, 2.5, f64::MAX, f64::MIN_POSITIVE, -f64::MIN_POSITIVE],
            vec![7.25; 20_000],
        ];
        cases.push((0..50_000).map(|_| stream.below(1_000_000) as f64 / 1e3 - 500.0).collect());
        cases.push((0..50_000).map(|_| (stream.below(5) as f64) * 0.1).collect());
        cases.push((0..60_000).map(|_| 1.0 + stream.below(1 << 30) as f64 * 1e-12).collect());
        cases.push((0..30_000).map(|_| f64::from(stream.below(1 << 20) as f32 / 77.0 - 6000.0)).collect());
        for values in cases {
            let n = values.len();
            let s = sorted(&values);
            let mut ranks: Vec<usize> = vec![0, n - 1, n / 2, (n - 1) / 2, n / 10, 9 * n / 10, n / 2];
            ranks.extend((0..20).map(|_| stream.below(n as u64) as usize));
            let got = values_at_ranks(&values, &ranks);
            for (r, v) in ranks.iter().zip(got) {
                assert_eq!(v.to_bits(), s[*r].to_bits(), "rank {r} of {n}");
            }
        }
    }

    #[test]
    fn columns_of_a_matrix_match_their_sorted_values_on_any_pool() {
        let mut stream = Stream::new(9, Purpose::Bootstrap);
        let (rows, cols) = (9_000, 5);
        let data: Vec<f32> = (0..rows * cols).map(|i| if i % cols == 3 { 1.0 } else { stream.below(4000) as f32 / 8.0 - 100.0 }).collect();
        let ranks = [0, rows / 2, rows / 2 - 1, rows - 1];
        let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().unwrap();
        let got = pool.install(|| column_values_at_ranks(&data, cols, &[0, 3, 4], &ranks));
        assert_eq!(got, column_values_at_ranks(&data, cols, &[0, 3, 4], &ranks));
        for (c, &j) in [0usize, 3, 4].iter().enumerate() {
            let s = sorted(&data.chunks_exact(cols).map(|r| f64::from(r[j])).collect::<Vec<_>>());
            let want: Vec<u64> = ranks.iter().map(|&r| s[r].to_bits()).collect();
            assert_eq!(got[c].iter().map(|v| v.to_bits()).collect::<Vec<_>>(), want, "column {j}");
        }
    }
}
