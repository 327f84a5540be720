//! Seeded percentile-bootstrap confidence intervals for any metric of a row sample.

use std::collections::BTreeMap;

use super::MetricSet;
use crate::rng::{Purpose, Stream};

/// A point estimate with a two-sided percentile interval.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub(crate) struct Interval {
    pub estimate: f64,
    pub lower: f64,
    pub upper: f64,
    pub level: f64,
    /// Resamples on which the metric was defined (and so entered the interval).
    pub resamples: usize,
}

/// Linear-interpolated quantile of sorted values (numpy's default "linear" method).
pub(crate) fn quantile_sorted(sorted: &[f64], q: f64) -> f64 {
    let pos = q * (sorted.len() - 1) as f64;
    let lo = pos.floor() as usize;
    let hi = pos.ceil() as usize;
    sorted[lo] + (sorted[hi] - sorted[lo]) * (pos - lo as f64)
}

/// Resamples `n` rows with replacement `resamples` times from the stream `(seed, bootstrap)` and
/// evaluates every metric of `metrics` on each index sample, in one pass: each resample is drawn
/// and scored once, whatever the number of metrics. A metric gets an interval when it is defined
/// on the full sample and on at least one resample (only those resamples enter its interval).
pub(crate) fn percentile_intervals(
    n: usize,
    resamples: usize,
    level: f64,
    seed: u64,
    metrics: impl Fn(&[usize]) -> MetricSet + Sync,
) -> BTreeMap<String, Interval> {
    let scorer: &Scorer = &metrics;
    shared_percentile_intervals(n, resamples, level, seed, &[scorer]).pop().unwrap_or_default()
}

/// One set of metrics of an index sample.
pub(crate) type Scorer<'a> = dyn Fn(&[usize]) -> MetricSet + Sync + 'a;

/// [`percentile_intervals`] for several sets of metrics of the same rows: each resample is drawn
/// once and scored by every set, so each set's intervals are the ones its own call would give.
pub(crate) fn shared_percentile_intervals(
    n: usize,
    resamples: usize,
    level: f64,
    seed: u64,
    scorers: &[&Scorer],
) -> Vec<BTreeMap<String, Interval>> {
    use rayon::prelude::*;
    let all: Vec<usize> = (0..n).collect();
    let estimates: Vec<Vec<(String, f64)>> =
        scorers.iter().map(|metrics| metrics(&all).into_iter().filter_map(|(name, v)| Some((name, v?))).collect()).collect();
    if n == 0 || resamples == 0 || estimates.iter().all(Vec::is_empty) {
        return vec![BTreeMap::new(); scorers.len()];
    }
    let mut stream = Stream::new(seed, Purpose::Bootstrap);
    let mut values: Vec<Vec<Vec<f64>>> = estimates.iter().map(|e| vec![Vec::with_capacity(resamples); e.len()]).collect();
    // Resamples are drawn in order from the one stream and scored a batch at a time on the
    // current rayon pool, kept in draw order: the same values whatever the thread count. The next
    // batch is drawn while the current one is scored.
    let batch = rayon::current_num_threads().max(1);
    let mut draw = |count: usize| -> Vec<Vec<usize>> {
        (0..count)
            .map(|_| {
                let mut idx = vec![0usize; n];
                stream.fill_below(n as u64, &mut idx);
                idx
            })
            .collect()
    };
    let mut current = draw(batch.min(resamples));
    let mut drawn = current.len();
    while !current.is_empty() {
        let next_count = batch.min(resamples - drawn);
        let (next, scored) = rayon::join(
            || draw(next_count),
            || current.par_iter().map(|idx| scorers.iter().map(|metrics| metrics(idx)).collect::<Vec<_>>()).collect::<Vec<_>>(),
        );
        drawn += next.len();
        for per_scorer in scored {
            for ((sample, names), v) in per_scorer.iter().zip(&estimates).zip(values.iter_mut()) {
                for ((name, _), v) in names.iter().zip(v.iter_mut()) {
                    if let Some(Some(x)) = sample.get(name) {
                        v.push(*x);
                    }
                }
            }
        }
        current = next;
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interval_of_a_mean_covers_it_and_is_reproducible() {
        let data: Vec<f64> = (0..200).map(|i| (i % 10) as f64).collect();
        let mean =
            |idx: &[usize]| MetricSet::from([("mean".to_string(), Some(idx.iter().map(|&i| data[i]).sum::<f64>() / idx.len() as f64))]);
        let a = percentile_intervals(data.len(), 500, 0.95, 9, mean).remove("mean").unwrap();
        let b = percentile_intervals(data.len(), 500, 0.95, 9, mean).remove("mean").unwrap();
        assert_eq!(a, b);
        // Scored on 3 threads, batches of 3 resamples: the same bits as one at a time.
        let pool = rayon::ThreadPoolBuilder::new().num_threads(3).build().unwrap();
        let c = pool.install(|| percentile_intervals(data.len(), 500, 0.95, 9, mean)).remove("mean").unwrap();
        assert_eq!((a.lower.to_bits(), a.upper.to_bits()), (c.lower.to_bits(), c.upper.to_bits()));
        assert!(a.lower < 4.5 && 4.5 < a.upper);
        // Standard error of the mean is sd/sqrt(n) = 2.87/14.1 ~ 0.20; a 95% interval is ~ +-0.4.
        assert!((a.upper - a.lower) > 0.5 && (a.upper - a.lower) < 1.2, "{a:?}");
    }
}
