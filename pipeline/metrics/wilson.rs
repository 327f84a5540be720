//! The Wilson score interval for a proportion (Wilson 1927, "Probable inference, the law of
//! succession, and statistical inference", JASA 22), which stays inside [0, 1] and keeps close
//! to its level for small counts and proportions near 0 or 1, where the normal interval does not.

/// The two-sided 95% standard normal quantile.
pub const Z95: f64 = 1.959_963_984_540_054;

/// The Wilson interval for `successes` of `n` at the normal quantile `z`; (0, 1) when n = 0.
pub fn interval(successes: usize, n: usize, z: f64) -> (f64, f64) {
    if n == 0 {
        return (0.0, 1.0);
    }
    let (k, n) = (successes as f64, n as f64);
    let p = k / n;
    let z2 = z * z;
    let centre = (p + z2 / (2.0 * n)) / (1.0 + z2 / n);
    let half = z / (1.0 + z2 / n) * (p * (1.0 - p) / n + z2 / (4.0 * n * n)).sqrt();
    ((centre - half).max(0.0), (centre + half).min(1.0))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn matches_a_worked_value() {
        // 81 of 263 at 95%: 0.2553 to 0.3662 (Newcombe 1998, "Two-sided confidence intervals for
        // the single proportion", Statistics in Medicine 17, Table I, method 3, from memory).
        let (lo, hi) = interval(81, 263, Z95);
        assert!((lo - 0.2553).abs() < 5e-5 && (hi - 0.3662).abs() < 5e-5, "{lo} {hi}");
        assert_eq!(interval(0, 0, Z95), (0.0, 1.0));
    }
}
