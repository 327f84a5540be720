//! Seeded percentile-bootstrap confidence intervals for any metric of a row sample.

use std::collections::BTreeMap;

use super::MetricSet;
use crate::rng::{Purpose, Stream};

/// A point estimate with a two-sided percentile interval.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Interval {
    pub estimate: f64,
    pub lower: f64,
    pub upper: f64,
    pub level: f64,
    /// Resamples on which the metric was defined (and so entered the interval).
    pub resamples: usize,
}

/// Linear-interpolated quantile of sorted values (numpy's default "linear" method).
pub fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    let pos = q * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo as f64)
}

/// The order a drawn resample's rows are handed to its scorers in. The rows and their repeats are
/// the same either way; what differs is the order a metric's sums add them in, and so its last
/// bits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ResampleOrder {
    /// In the order drawn (results layouts up to 9): a scorer reads the sample's rows at random.
    Drawn,
    /// In sample-row order, each row as often as it was drawn (results layout 10 on): a scorer
    /// reads the sample front to back, a linear pass over memory.
    Rows,
}

/// Results layout from which resamples are scored in row order.
const ROW_ORDER_FROM: u32 = 10;

impl ResampleOrder {
    /// The order results layout `layout_version` scores its resamples in.
    pub fn of_layout(layout_version: u32) -> Self {
        if layout_version >= ROW_ORDER_FROM {
            ResampleOrder::Rows
        } else {
            ResampleOrder::Drawn
        }
    }

    /// Puts a drawn resample (indices below `n`) in this order.
    fn arrange(self, idx: &mut [usize], n: usize) {
        if self == ResampleOrder::Drawn {
            return;
        }
        // A counting sort: how often each row was drawn, then the rows listed that often. A
        // byte per row holds every count but a row drawn 256 times or more (of a million draws,
        // the most drawn row comes about ten times), and keeps the table a quarter of the size
        // in cache; should a count wrap, the rows are counted again in 32 bits.
        let mut counts = vec![0u8; n];
        let mut wrapped = false;
        for &i in idx.iter() {
            let count = &mut counts[i];
            *count = count.wrapping_add(1);
            wrapped |= *count == 0;
        }
        if wrapped {
            let mut wide = vec![0u32; n];
            for &i in idx.iter() {
                wide[i] += 1;
            }
            list_rows(&wide, idx);
        } else {
            list_rows(&counts, idx);
        }
    }
}

/// Writes each row of `counts` into `slots` as often as it counts, in row order; the counts
/// add up to `slots.len()`.
fn list_rows<C: Copy + Into<u32>>(counts: &[C], slots: &mut [usize]) {
    /// Most rows are drawn at most this often: each is written this many times, unconditionally,
    /// and the next row overwrites what lies past its own count. That leaves no branch on the
    /// count for the draws to make unpredictable.
    const AT_ONCE: usize = 4;
    let len = slots.len();
    let mut at = 0;
    for (row, &count) in counts.iter().enumerate() {
        let count = count.into() as usize;
        if count <= AT_ONCE && at + AT_ONCE <= len {
            slots[at..at + AT_ONCE].fill(row);
        } else {
            slots[at..at + count].fill(row);
        }
        at += count;
    }
}

/// Resamples `n` rows with replacement `resamples` times from the stream `(seed, bootstrap)` and
/// evaluates every metric of `metrics` on each index sample, in one pass: each resample is drawn
/// and scored once, whatever the number of metrics. A metric gets an interval when it is defined
/// on the full sample and on at least one resample (only those resamples enter its interval).
/// `order` is the order each resample's rows reach `metrics` in.
pub fn percentile_intervals(
    n: usize,
    resamples: usize,
    level: f64,
    seed: u64,
    order: ResampleOrder,
    metrics: impl Fn(&[usize]) -> MetricSet + Sync,
) -> BTreeMap<String, Interval> {
    let scorer: &Scorer = &metrics;
    shared_percentile_intervals(n, resamples, level, seed, order, &[scorer]).pop().unwrap_or_default()
}

/// One set of metrics of an index sample.
pub type Scorer<'a> = dyn Fn(&[usize]) -> MetricSet + Sync + 'a;

/// [`percentile_intervals`] for several sets of metrics of the same rows: each resample is drawn
/// once and scored by every set, so each set's intervals are the ones its own call would give.
pub fn shared_percentile_intervals(
    n: usize,
    resamples: usize,
    level: f64,
    seed: u64,
    order: ResampleOrder,
    scorers: &[&Scorer],
) -> Vec<BTreeMap<String, Interval>> {
    let estimates: Vec<Vec<(String, f64)>> = {
        let all: Vec<usize> = (0..n).collect();
        scorers.iter().map(|metrics| metrics(&all).into_iter().filter_map(|(name, v)| Some((name, v?))).collect()).collect()
    };
    if n == 0 || resamples == 0 || estimates.iter().all(Vec::is_empty) {
        return vec![BTreeMap::new(); scorers.len()];
    }
    let mut stream = Stream::new(seed, Purpose::Bootstrap);
    let mut values: Vec<Vec<Vec<f64>>> = estimates.iter().map(|e| vec![Vec::with_capacity(resamples); e.len()]).collect();
    // Each resample is drawn and scored on a thread of the current rayon pool from its place in
    // the one stream, and the results are kept in draw order: the same values whatever the
    // thread count. Each scoring thread puts its own resample in `order` first.
    let scored = draw_and_score(&mut stream, n as u64, n, resamples, |mut idx| {
        order.arrange(&mut idx, n);
        scorers.iter().map(|metrics| metrics(&idx)).collect::<Vec<_>>()
    });
    for per_scorer in scored {
        for ((sample, names), v) in per_scorer.iter().zip(&estimates).zip(values.iter_mut()) {
            for ((name, _), v) in names.iter().zip(v.iter_mut()) {
                if let Some(Some(x)) = sample.get(name) {
                    v.push(*x);
                }
            }
        }
    }
    let tail = (1.0 - level) / 2.0;
    estimates
        .into_iter()
        .zip(values)
        .map(|(names, values)| {
            let mut out = BTreeMap::new();
            for ((name, estimate), mut v) in names.into_iter().zip(values) {
                if v.is_empty() {
                    continue;
                }
                v.sort_by(f64::total_cmp);
                out.insert(
                    name,
                    Interval {
                        estimate,
                        lower: quantile_sorted(&v, tail),
                        upper: quantile_sorted(&v, 1.0 - tail),
                        level,
                        resamples: v.len(),
                    },
                );
            }
            out
        })
        .collect()
}

/// `count` resamples of `len` draws below `bound` from `stream`, each handed to `score`, the
/// results in draw order: the values of drawing them one after another. Resamples are drawn on
/// the current rayon pool's threads, each from its own place in the stream: a draw takes two
/// 32-bit words, so resample j of a run starts 2 * len * j words on if no draw before it was
/// rejected (for `bound` below 2^32 a draw is rejected with probability under 2^-32). Where one
/// was, the resamples after it are drawn again from their true places, a pool's width at a
/// time until a batch passes without a rejection (the width doubling after each), so a rejection
/// wastes at most a batch. The stream is left after the last resample.
fn draw_and_score<R: Send>(stream: &mut Stream, bound: u64, len: usize, count: usize, score: impl Fn(Vec<usize>) -> R + Sync) -> Vec<R> {
    use rayon::prelude::*;
    let words = 2 * len as u128;
    let mut out = Vec::with_capacity(count);
    let mut batch = count;
    while out.len() < count {
        let start = stream.word_position();
        let drawn: Vec<(u64, R)> = (0..batch.min(count - out.len()))
            .into_par_iter()
            .map(|j| {
                let mut own = stream.at_word(start + words * j as u128);
                let mut idx = vec![0usize; len];
                let rejected = own.fill_below(bound, &mut idx);
                (rejected, score(idx))
            })
            .collect();
        let mut position = start;
        let mut clean = true;
        for (rejected, result) in drawn {
            out.push(result);
            position += words + 2 * u128::from(rejected);
            if rejected > 0 {
                clean = false;
                break;
            }
        }
        batch = if clean { batch.saturating_mul(2) } else { rayon::current_num_threads() };
        stream.seek_word(position);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interval_of_a_mean_covers_it_and_is_reproducible() {
        let data: Vec<f64> = (0..200).map(|i| (i % 10) as f64).collect();
        let mean =
            |idx: &[usize]| MetricSet::from([("mean".to_string(), Some(idx.iter().map(|&i| data[i]).sum::<f64>() / idx.len() as f64))]);
        for order in [ResampleOrder::Drawn, ResampleOrder::Rows] {
            let a = percentile_intervals(data.len(), 500, 0.95, 9, order, mean).remove("mean").unwrap();
            let b = percentile_intervals(data.len(), 500, 0.95, 9, order, mean).remove("mean").unwrap();
            assert_eq!(a, b);
            // Scored on 3 threads, batches of 3 resamples: the same bits as one at a time.
            let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().unwrap();
            let c = pool.install(|| percentile_intervals(data.len(), 500, 0.95, 9, order, mean)).remove("mean").unwrap();
            assert_eq!((a.lower.to_bits(), a.upper.to_bits()), (c.lower.to_bits(), c.upper.to_bits()));
        }
        let a = percentile_intervals(data.len(), 500, 0.95, 9, ResampleOrder::Rows, mean).remove("mean").unwrap();
        assert!(a.lower < 4.5 && 4.5 < a.upper);
        // Standard error of the mean is sd/sqrt(n) = 2.87/14.1 ~ 0.20; a 95% interval is ~ +-0.4.
        assert!((a.upper - a.lower) > 0.5 && (a.upper - a.lower) < 1.2, "{a:?}");
    }

    #[test]
    fn resamples_drawn_in_parallel_are_the_resamples_drawn_one_after_another() {
        // Below 2^63 + 1 about half of all draws are rejected, so most resamples start somewhere
        // other than their first guess; below 1000 none is.
        for bound in [(1u64 << 63) + 1, 1000] {
            let mut serial = Stream::new(4, Purpose::Bootstrap);
            let expected: Vec<Vec<usize>> = (0..40)
                .map(|_| {
                    let mut idx = vec![0usize; 7];
                    serial.fill_below(bound, &mut idx);
                    idx
                })
                .collect();
            for threads in [1, 2, 3] {
                let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
                let mut stream = Stream::new(4, Purpose::Bootstrap);
                let scored = std::sync::atomic::AtomicUsize::new(0);
                let count = |idx| {
                    scored.fetch_add(1, std::sync::atomic::Ordering::Relaxed);
                    idx
                };
                let drawn = pool.install(|| draw_and_score(&mut stream, bound, 7, 40, count));
                assert_eq!(drawn, expected, "bound {bound}, {threads} threads");
                assert_eq!(stream.word_position(), serial.word_position(), "the stream is left after the last resample");
                // The first batch is all 40; the batch after a rejection is a pool's width,
                // doubling while none is rejected, so a rejection wastes at most the rest of its
                // batch (redrawing all the rest after each rejection scored 796).
                let scored = scored.into_inner();
                if bound == 1000 {
                    assert_eq!(scored, 40, "no rejection, nothing drawn twice");
                } else {
                    assert!(scored <= 40 + 40 * threads, "{scored} resamples scored for 40 on {threads} threads");
                }
            }
        }
    }

    /// Row order hands each scorer the rows drawn, each as often as drawn, sorted; draw order the
    /// draws themselves. So the two see the same multiset of rows in every resample.
    #[test]
    fn row_order_is_the_drawn_rows_sorted() {
        use std::sync::Mutex;
        let seen = |order| {
            let resamples = Mutex::new(Vec::new());
            let record = |idx: &[usize]| {
                resamples.lock().unwrap().push(idx.to_vec());
                MetricSet::from([("rows".to_string(), Some(idx.len() as f64))])
            };
            // One thread, so the resamples are recorded in draw order.
            let pool = rayon::ThreadPoolBuilder::new().num_threads(1).build().unwrap();
            pool.install(|| percentile_intervals(37, 25, 0.9, 4, order, record));
            resamples.into_inner().unwrap()
        };
        let (drawn, rows) = (seen(ResampleOrder::Drawn), seen(ResampleOrder::Rows));
        // The whole sample first (in row order either way), then the resamples in draw order.
        assert_eq!(drawn.len(), 26);
        assert_eq!(drawn[0], (0..37).collect::<Vec<_>>());
        for (d, r) in drawn.iter().zip(&rows) {
            let mut sorted = d.clone();
            sorted.sort_unstable();
            assert_eq!(&sorted, r);
        }
        assert!(drawn[1..].iter().any(|d| d.windows(2).any(|w| w[0] > w[1])), "the draws are not already sorted");
        assert!(drawn[1..].iter().any(|d| d.windows(2).any(|w| w[0] == w[1])), "some row is drawn twice");
    }

    /// The counting sort against a comparison sort: rows drawn once to 300 times (past a byte's
    /// count), rows not drawn, runs at the end of the slots.
    #[test]
    fn arranging_rows_sorts_them_whatever_their_counts() {
        let mut stream = Stream::new(3, Purpose::Bootstrap);
        let mut cases: Vec<(usize, Vec<usize>)> =
            vec![(3, [vec![1; 300], vec![2; 5], vec![0; 7]].concat()), (5, vec![4, 4, 4, 4, 4, 4, 0]), (4, vec![3, 2, 1, 0]), (1, vec![0])];
        for n in [2usize, 9, 100, 1000] {
            for draws in [1, n / 2 + 1, n, 3 * n] {
                cases.push((n, (0..draws).map(|_| stream.below(n as u64) as usize).collect()));
            }
        }
        for (n, drawn) in cases {
            let mut arranged = drawn.clone();
            ResampleOrder::Rows.arrange(&mut arranged, n);
            let mut sorted = drawn.clone();
            sorted.sort_unstable();
            assert_eq!(arranged, sorted, "{n} rows");
            let mut kept = drawn.clone();
            ResampleOrder::Drawn.arrange(&mut kept, n);
            assert_eq!(kept, drawn);
        }
    }

    #[test]
    fn each_layout_scores_in_its_order() {
        assert_eq!(ResampleOrder::of_layout(9), ResampleOrder::Drawn);
        assert_eq!(ResampleOrder::of_layout(10), ResampleOrder::Rows);
    }
}
