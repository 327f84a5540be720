//! How far a batch's counts over a column's bins are from the reference counts: the population
//! stability index with one stated smoothing rule, and the two-sample chi-square test of the
//! 2 x B table, whose p-value sits beside it because the index grows with the number of bins and
//! shrinks with the sample size while the test accounts for both.
//!
//! Smoothing (the same in `tests/reference/monitor_check.py`): bins empty on both sides are
//! dropped, since they carry no information; every remaining count on both sides gets 0.5 added
//! (Jeffreys' additive rule), and the shares are the smoothed counts over their smoothed totals.
//! The chi-square test uses the raw counts of the same bins, without continuity correction,
//! with B' - 1 degrees of freedom for B' bins kept.

use serde::{Deserialize, Serialize};

/// What is added to every kept count before shares are taken.
pub(crate) const SMOOTHING: f64 = 0.5;

pub(crate) const SMOOTHING_RULE: &str =
    "bins empty in both the reference and the batch are dropped; 0.5 is added to every remaining count on both sides before shares are taken";

/// The comparison of one column's batch counts with its reference counts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Stability {
    /// Σ (a - e) ln(a / e) over the kept bins, a the batch's smoothed share, e the reference's.
    pub psi: f64,
    /// Pearson's statistic of the 2 x B' table of raw counts.
    pub chi_square: f64,
    pub degrees_of_freedom: usize,
    /// P(χ² with that many degrees of freedom ≥ the statistic); 1 when fewer than two bins are kept.
    pub p_value: f64,
}

/// Compares `batch` counts with `reference` counts over the same bins.
pub fn compare(reference: &[u64], batch: &[u64]) -> Stability {
    let kept: Vec<(f64, f64)> = reference.iter().zip(batch).filter(|(r, b)| **r + **b > 0).map(|(&r, &b)| (r as f64, b as f64)).collect();
    let smoothed_total = |side: &dyn Fn(&(f64, f64)) -> f64| kept.iter().map(|c| side(c) + SMOOTHING).sum::<f64>();
    let (ref_total, batch_total) = (smoothed_total(&|c| c.0), smoothed_total(&|c| c.1));
    let psi = kept
        .iter()
        .map(|&(r, b)| {
            let (e, a) = ((r + SMOOTHING) / ref_total, (b + SMOOTHING) / batch_total);
            (a - e) * (a / e).ln()
        })
        .sum();
    let (n_ref, n_batch): (f64, f64) = (kept.iter().map(|c| c.0).sum(), kept.iter().map(|c| c.1).sum());
    let n = n_ref + n_batch;
    if kept.len() < 2 || n_ref == 0.0 || n_batch == 0.0 {
        return Stability { psi, chi_square: 0.0, degrees_of_freedom: kept.len().saturating_sub(1), p_value: 1.0 };
    }
    let chi_square = kept
        .iter()
        .map(|&(r, b)| {
            let column = r + b;
            let (er, eb) = (n_ref * column / n, n_batch * column / n);
            (r - er) * (r - er) / er + (b - eb) * (b - eb) / eb
        })
        .sum();
    let df = kept.len() - 1;
    Stability { psi, chi_square, degrees_of_freedom: df, p_value: chi_square_survival(chi_square, df) }
}

/// Reference and batch counts of two samples of one number over decile bins of the reference
/// sample, as `profile.json` bins a feature: what the size of the chi-square test is measured on.
pub fn decile_counts(reference: &[f64], batch: &[f64]) -> (Vec<u64>, Vec<u64>) {
    let bins = crate::analysis::profile::numeric_bins(reference);
    let count = |values: &[f64]| {
        let mut counts = vec![0u64; bins.len()];
        for &v in values {
            counts[bins.of_number(Some(v))] += 1;
        }
        counts
    };
    (count(reference), count(batch))
}

/// `ln(exp(a) + exp(b))` without overflow.
fn log_add(a: f64, b: f64) -> f64 {
    if a == f64::NEG_INFINITY {
        return b;
    }
    let (hi, lo) = if a > b { (a, b) } else { (b, a) };
    hi + (lo - hi).exp().ln_1p()
}

/// P(χ²_df ≥ x): the regularized upper incomplete gamma function Q(df/2, x/2), summed in closed
/// form, which exists because df/2 is a whole or a half number (Abramowitz and Stegun 6.5.13 and
/// 26.4.4, from memory; checked against scipy.stats.chi2.sf in CI):
/// - df even, s = df/2: Q = e^{-x/2} Σ_{k<s} (x/2)^k / k!;
/// - df odd: Q = erfc(√(x/2)) + e^{-x/2} Σ_{k=1}^{(df-1)/2} (x/2)^{k-1/2} / Γ(k + 1/2).
///
/// Every term is positive, so the sums lose nothing to cancellation; they are taken in logs.
pub(crate) fn chi_square_survival(x: f64, df: usize) -> f64 {
    if x.is_nan() || x <= 0.0 || df == 0 {
        return 1.0;
    }
    let h = x / 2.0;
    let ln_h = h.ln();
    let mut log_sum = f64::NEG_INFINITY;
    if df.is_multiple_of(2) {
        let mut ln_factorial = 0.0;
        for k in 0..df / 2 {
            if k > 0 {
                ln_factorial += (k as f64).ln();
            }
            log_sum = log_add(log_sum, k as f64 * ln_h - ln_factorial);
        }
        (log_sum - h).exp().min(1.0)
    } else {
        // ln Γ(1/2) = ln √π.
        let mut ln_gamma = 0.5 * std::f64::consts::PI.ln();
        for k in 1..=(df - 1) / 2 {
            ln_gamma += (k as f64 - 0.5).ln();
            log_sum = log_add(log_sum, (k as f64 - 0.5) * ln_h - ln_gamma);
        }
        (libm::erfc(h.sqrt()) + (log_sum - h).exp()).min(1.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn survival_matches_textbook_values() {
        // Critical values of the chi-square distribution at 5%: 3.841 (1 df), 5.991 (2 df),
        // 16.919 (9 df) (any statistics table, from memory); exact closed forms for 2 df.
        assert!((chi_square_survival(3.841_458_820_694_124, 1) - 0.05).abs() < 1e-12);
        assert!((chi_square_survival(5.991_464_547_107_979, 2) - 0.05).abs() < 1e-12);
        assert!((chi_square_survival(16.918_977_604_620_45, 9) - 0.05).abs() < 1e-12);
        assert!((chi_square_survival(7.0, 2) - (-3.5f64).exp()).abs() < 1e-16);
        assert_eq!(chi_square_survival(0.0, 4), 1.0);
        assert!(chi_square_survival(5000.0, 9) < 1e-300);
    }

    #[test]
    fn identical_shares_give_zero_and_empty_bins_are_dropped() {
        let s = compare(&[10, 20, 30, 0], &[20, 40, 60, 0]);
        assert!(s.psi.abs() < 1e-3, "smoothing moves equal shares only slightly: {}", s.psi);
        assert_eq!(s.degrees_of_freedom, 2, "the bin empty on both sides is dropped");
        assert!(s.p_value > 0.99);
        let moved = compare(&[100, 100, 100], &[10, 100, 190]);
        assert!(moved.psi > 0.25 && moved.p_value < 1e-10, "{moved:?}");
    }
}
