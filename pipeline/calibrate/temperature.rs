//! Temperature scaling (Guo, Pleiss, Sun & Weinberger, "On Calibration of Modern Neural
//! Networks", ICML 2017, section 4.2): one T > 0 divides every logit; T minimises the mean log
//! loss of softmax(z / T) on held-out rows. The loss is convex in beta = 1 / T (a log-sum-exp of
//! functions linear in beta), so its derivative is non-decreasing and its root is found by
//! bisection to the last bit, with no starting point or tolerance to tune.

/// The search range of T: [1 / BETA_MAX, 1 / BETA_MIN].
const BETA_MIN: f64 = 0.01;
const BETA_MAX: f64 = 100.0;

/// A fitted temperature.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TemperatureFit {
    pub temperature: f64,
    /// The minimum lies at or beyond the search range, [0.01, 100] (uninformative or perfectly
    /// separated held-out rows).
    pub at_bound: bool,
}

/// Row-wise softmax of `beta` times the logits, in f64.
pub fn softmax_rows(logits: &[f64], classes: usize, beta: f64) -> Vec<f64> {
    logits
        .chunks_exact(classes)
        .flat_map(|row| {
            let max = row.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(beta * v));
            let e: Vec<f64> = row.iter().map(|&v| libm::exp(beta * v - max)).collect();
            let sum: f64 = e.iter().sum();
            e.into_iter().map(move |x| x / sum)
        })
        .collect()
}

/// Mean log loss of softmax(beta z) (natural log, unclipped), from the log-sum-exp.
pub fn mean_log_loss(logits: &[f64], labels: &[usize], classes: usize, beta: f64) -> f64 {
    let total: f64 = logits
        .chunks_exact(classes)
        .zip(labels)
        .map(|(row, &y)| {
            let max = row.iter().fold(f64::NEG_INFINITY, |m, &v| m.max(beta * v));
            max + libm::log(row.iter().map(|&v| libm::exp(beta * v - max)).sum::<f64>()) - beta * row[y]
        })
        .sum();
    total / labels.len().max(1) as f64
}

/// d/d(beta) of [`mean_log_loss`]: the mean of E_softmax(beta z)[z] - z_y.
fn slope(logits: &[f64], labels: &[usize], classes: usize, beta: f64) -> f64 {
    let p = softmax_rows(logits, classes, beta);
    let total: f64 = logits
        .chunks_exact(classes)
        .zip(p.chunks_exact(classes))
        .zip(labels)
        .map(|((z, p), &y)| z.iter().zip(p).map(|(z, p)| z * p).sum::<f64>() - z[y])
        .sum();
    total / labels.len().max(1) as f64
}

/// The temperature minimising the mean log loss of `logits` (`classes` per row) on `labels`.
pub fn fit(logits: &[f64], labels: &[usize], classes: usize) -> TemperatureFit {
    let g = |beta: f64| slope(logits, labels, classes, beta);
    if g(BETA_MIN) >= 0.0 {
        return TemperatureFit { temperature: 1.0 / BETA_MIN, at_bound: true };
    }
    if g(BETA_MAX) <= 0.0 {
        return TemperatureFit { temperature: 1.0 / BETA_MAX, at_bound: true };
    }
    let (mut lo, mut hi) = (BETA_MIN, BETA_MAX);
    // Each halving keeps g(lo) < 0 < g(hi); stop when the midpoint is an end (adjacent floats).
    loop {
        let mid = 0.5 * (lo + hi);
        if mid <= lo || mid >= hi {
            break;
        }
        let s = g(mid);
        if s == 0.0 {
            (lo, hi) = (mid, mid);
            break;
        }
        if s < 0.0 {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    TemperatureFit { temperature: 1.0 / (0.5 * (lo + hi)), at_bound: false }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn an_overconfident_model_is_cooled() {
        // Logits twice as large as the truth: labels drawn so that softmax(z / 2) is calibrated.
        let mut logits = Vec::new();
        let mut labels = Vec::new();
        for i in 0..400 {
            let z = (i as f64 / 400.0 - 0.5) * 12.0;
            let p = 1.0 / (1.0 + (-(z / 2.0)).exp());
            for j in 0..10 {
                logits.extend([0.0, z]);
                labels.push(((j as f64 + 0.5) / 10.0 < p) as usize);
            }
        }
        let t = fit(&logits, &labels, 2);
        assert!(!t.at_bound);
        assert!((t.temperature - 2.0).abs() < 0.1, "{t:?}");
        let at = |temp: f64| mean_log_loss(&logits, &labels, 2, 1.0 / temp);
        assert!(at(t.temperature) <= at(t.temperature * 1.001) && at(t.temperature) <= at(t.temperature / 1.001));
    }
}
