//! Fixed number formatting, so that every report and card is byte-stable for the same figures.

/// `x` with `digits` significant digits, no exponent for ordinary magnitudes.
pub fn sig(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return format!("{x}");
    }
    if x == 0.0 {
        return "0".into();
    }
    let magnitude = libm::floor(libm::log10(x.abs())) as i32;
    if !(-5..=9).contains(&magnitude) {
        return format!("{:.*e}", digits.saturating_sub(1), x);
    }
    let decimals = (digits as i32 - 1 - magnitude).max(0) as usize;
    let s = format!("{:.*}", decimals, x);
    if s.contains('.') {
        let trimmed = s.trim_end_matches('0').trim_end_matches('.');
        if trimmed == "-0" {
            "0".into()
        } else {
            trimmed.to_string()
        }
    } else {
        s
    }
}

/// Fixed decimals, for metrics in tables (`-0` printed as `0`).
pub fn fixed(x: f64, decimals: usize) -> String {
    let s = format!("{:.*}", decimals, x);
    if s.trim_start_matches('-').chars().all(|c| c == '0' || c == '.') {
        s.trim_start_matches('-').to_string()
    } else {
        s
    }
}

/// A mean and its standard deviation across seeds, as every table shows them: `0.8123 ± 0.0040`.
/// `n` with the noun in the number it takes: "1 CPU", "2 CPUs".
pub fn count(n: usize, one: &str, many: &str) -> String {
    format!("{n} {}", if n == 1 { one } else { many })
}

pub fn mean_sd(mean: f64, sd: f64) -> String {
    format!("{} ± {}", fixed(mean, 4), fixed(sd, 4))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn significant_digits() {
        assert_eq!(sig(0.123456, 4), "0.1235");
        assert_eq!(sig(1234.6, 3), "1235");
        assert_eq!(sig(2.0, 4), "2");
        assert_eq!(sig(-0.00001234, 2), "-0.000012");
        assert_eq!(fixed(-0.0001, 3), "0.000");
    }
}
