//! Regression metrics: RMSE, MAE and R2.

pub fn rmse(truth: &[f64], predicted: &[f64]) -> Option<f64> {
    (!truth.is_empty()).then(|| (truth.iter().zip(predicted).map(|(t, p)| (t - p).powi(2)).sum::<f64>() / truth.len() as f64).sqrt())
}

pub fn mae(truth: &[f64], predicted: &[f64]) -> Option<f64> {
    (!truth.is_empty()).then(|| truth.iter().zip(predicted).map(|(t, p)| (t - p).abs()).sum::<f64>() / truth.len() as f64)
}

/// Coefficient of determination 1 - SS_res / SS_tot. For a constant target SS_tot is 0: the
/// answer is 1 for a perfect prediction and 0 otherwise (scikit-learn's `force_finite=True`).
pub fn r2(truth: &[f64], predicted: &[f64]) -> Option<f64> {
    if truth.is_empty() {
        return None;
    }
    let mean = truth.iter().sum::<f64>() / truth.len() as f64;
    let ss_tot: f64 = truth.iter().map(|t| (t - mean).powi(2)).sum();
    let ss_res: f64 = truth.iter().zip(predicted).map(|(t, p)| (t - p).powi(2)).sum();
    Some(if ss_tot == 0.0 {
        if ss_res == 0.0 {
            1.0
        } else {
            0.0
        }
    } else {
        1.0 - ss_res / ss_tot
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constant_target_r2_is_defined() {
        assert_eq!(r2(&[2.0, 2.0], &[2.0, 2.0]), Some(1.0));
        assert_eq!(r2(&[2.0, 2.0], &[1.0, 3.0]), Some(0.0));
        assert_eq!(r2(&[], &[]), None);
    }
}
