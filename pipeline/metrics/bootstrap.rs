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
    use rayon::prelude::*;
    let all: Vec<usize> = (0..n).collect();
    let estimates: Vec<(String, f64)> = metrics(&all).into_iter().filter_map(|(name, v)| Some((name, v?))).collect();
    let mut out = BTreeMap::new();
    if n == 0 || resamples == 0 || estimates.is_empty() {
        return out;
    }
    let mut stream = Stream::new(seed, Purpose::Bootstrap);
    let mut values: Vec<Vec<f64>> = vec![Vec::with_capacity(resamples); estimates.len()];
    // Resamples are drawn in order from the one stream, then scored a batch at a time on the
    // current rayon pool and kept in draw order: the same values whatever the thread count.
    let batch = rayon::current_num_threads().max(1);
    let mut drawn = 0;
    while drawn < resamples {
        let draws: Vec<Vec<usize>> =
            (0..batch.min(resamples - drawn)).map(|_| (0..n).map(|_| stream.below(n as u64) as usize).collect()).collect();
        drawn += draws.len();
        let samples: Vec<MetricSet> = draws.par_iter().map(|idx| metrics(idx)).collect();
        for sample in samples {
            for ((name, _), v) in estimates.iter().zip(values.iter_mut()) {
                if let Some(Some(x)) = sample.get(name) {
                    v.push(*x);
                }
            }
        }
    }
    let tail = (1.0 - level) / 2.0;
    for ((name, estimate), mut v) in estimates.into_iter().zip(values) {
        if v.is_empty() {
            continue;
        }
        v.sort_by(f64::total_cmp);
        out.insert(
            name,
            Interval { estimate, lower: quantile_sorted(&v, tail), upper: quantile_sorted(&v, 1.0 - tail), level, resamples: v.len() },
        );
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
