//! Split conformal prediction intervals for regression (Lei, G'Sell, Rinaldo, Tibshirani &
//! Wasserman, "Distribution-free predictive inference for regression", JASA 2018, section 2.2):
//! with n held-out absolute residuals and coverage 1 - alpha, k = ceil((n + 1)(1 - alpha)) and the
//! half-width is the k-th smallest residual; a new row's interval [prediction - half-width,
//! prediction + half-width] covers its target with probability at least 1 - alpha (and below
//! 1 - alpha + 1 / (n + 1) without ties) when rows are exchangeable.

/// A fitted interval half-width.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HalfWidth {
    pub k: usize,
    pub half_width: f64,
}

/// Why no interval could be fitted.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TooFewResiduals {
    pub k: usize,
    pub n: usize,
}

/// k = ceil((n + 1) coverage), where a product within 1e-9 (relative) above an integer counts as
/// that integer, so a decimal coverage such as 0.9 gives the k exact arithmetic gives (181 * 0.9
/// is 162.90000000000001 in binary, and 100 * 0.9 must give 90, not 91).
pub fn rank(n: usize, coverage: f64) -> usize {
    let x = (n + 1) as f64 * coverage;
    let below = x.floor();
    if x - below <= 1e-9 * x.max(1.0) {
        below as usize
    } else {
        x.ceil() as usize
    }
}

/// The split conformal half-width for `coverage` (1 - alpha) from held-out absolute residuals.
pub fn half_width(residuals: &[f64], coverage: f64) -> Result<HalfWidth, TooFewResiduals> {
    let n = residuals.len();
    let k = rank(n, coverage);
    if k == 0 || k > n {
        return Err(TooFewResiduals { k, n });
    }
    let mut sorted = residuals.to_vec();
    sorted.sort_by(f64::total_cmp);
    Ok(HalfWidth { k, half_width: sorted[k - 1] })
}

/// The fewest held-out rows that give a finite interval at `coverage`: the smallest n with
/// ceil((n + 1) coverage) <= n.
pub fn minimum_rows(coverage: f64) -> usize {
    (1..100_000_000).find(|&n| rank(n, coverage) <= n).unwrap_or(usize::MAX)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rank_is_exact_for_decimal_coverage() {
        assert_eq!(rank(99, 0.9), 90);
        assert_eq!(rank(100, 0.9), 91);
        assert_eq!(rank(9, 0.9), 9);
        assert_eq!(rank(8, 0.9), 9);
        assert_eq!(minimum_rows(0.9), 9);
        assert_eq!(minimum_rows(0.95), 19);
    }

    #[test]
    fn too_few_rows_are_refused() {
        assert_eq!(half_width(&[1.0; 8], 0.9), Err(TooFewResiduals { k: 9, n: 8 }));
        assert_eq!(half_width(&[3.0, 1.0, 2.0, 5.0, 4.0, 9.0, 8.0, 7.0, 6.0], 0.9).map(|h| h.half_width), Ok(9.0));
    }
}
