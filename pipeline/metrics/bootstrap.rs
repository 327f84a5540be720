//! Seeded percentile-bootstrap confidence intervals for any metric of a row sample.

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

/// Resamples `n` rows with replacement `resamples` times from the stream `(seed, bootstrap)` and
/// evaluates `metric` on each index sample. `None` when the metric is undefined on the full sample
/// or on every resample.
pub fn percentile_interval(
    n: usize,
    resamples: usize,
    level: f64,
    seed: u64,
    metric: impl Fn(&[usize]) -> Option<f64>,
) -> Option<Interval> {
    let all: Vec<usize> = (0..n).collect();
    let estimate = metric(&all)?;
    if n == 0 || resamples == 0 {
        return None;
    }
    let mut stream = Stream::new(seed, Purpose::Bootstrap);
    let mut values = Vec::with_capacity(resamples);
    let mut idx = vec![0usize; n];
    for _ in 0..resamples {
        for slot in idx.iter_mut() {
            *slot = stream.below(n as u64) as usize;
        }
        if let Some(v) = metric(&idx) {
            values.push(v);
        }
    }
    if values.is_empty() {
        return None;
    }
    values.sort_by(f64::total_cmp);
    let tail = (1.0 - level) / 2.0;
    Some(Interval {
        estimate,
        lower: quantile_sorted(&values, tail),
        upper: quantile_sorted(&values, 1.0 - tail),
        level,
        resamples: values.len(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interval_of_a_mean_covers_it_and_is_reproducible() {
        let data: Vec<f64> = (0..200).map(|i| (i % 10) as f64).collect();
        let mean = |idx: &[usize]| Some(idx.iter().map(|&i| data[i]).sum::<f64>() / idx.len() as f64);
        let a = percentile_interval(data.len(), 500, 0.95, 9, mean).unwrap();
        let b = percentile_interval(data.len(), 500, 0.95, 9, mean).unwrap();
        assert_eq!(a, b);
        assert!(a.lower < 4.5 && 4.5 < a.upper);
        // Standard error of the mean is sd/sqrt(n) = 2.87/14.1 ~ 0.20; a 95% interval is ~ +-0.4.
        assert!((a.upper - a.lower) > 0.5 && (a.upper - a.lower) < 1.2, "{a:?}");
    }
}
