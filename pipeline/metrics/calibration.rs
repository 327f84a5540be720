//! Calibration: expected calibration error on top-label confidence, and reliability-diagram data
//! on the positive-class probability for binary models.

/// One bin of a reliability diagram.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ReliabilityBin {
    pub lower: f64,
    pub upper: f64,
    pub count: usize,
    pub mean_predicted: f64,
    pub observed: f64,
}

/// Index of the equal-width bin holding `x` in [0, 1]; 1.0 falls in the last bin.
fn bin_of(x: f64, bins: usize) -> usize {
    ((x * bins as f64) as usize).min(bins - 1)
}

/// ECE with `bins` equal-width bins on [0, 1] over top-label confidence (the largest class
/// probability), each bin's |accuracy - mean confidence| weighted by its share of rows
/// (Guo et al. 2017, "On Calibration of Modern Neural Networks", eq. 3).
pub fn expected_calibration_error(labels: &[usize], probs: &[f64], k: usize, bins: usize) -> Option<f64> {
    if labels.is_empty() || bins == 0 {
        return None;
    }
    let mut count = vec![0usize; bins];
    let mut confidence = vec![0.0; bins];
    let mut correct = vec![0.0; bins];
    for (row, &y) in probs.chunks_exact(k).zip(labels) {
        let top = super::classification::argmax(row);
        let b = bin_of(row[top], bins);
        count[b] += 1;
        confidence[b] += row[top];
        correct[b] += (top == y) as u8 as f64;
    }
    let n = labels.len() as f64;
    Some(
        (0..bins)
            .filter(|&b| count[b] > 0)
            .map(|b| (count[b] as f64 / n) * (correct[b] / count[b] as f64 - confidence[b] / count[b] as f64).abs())
            .sum(),
    )
}

/// Observed positive share against mean predicted probability in `bins` equal-width bins on the
/// positive-class probability, binned as the "uniform" strategy of scikit-learn's
/// `calibration_curve` does: bins closed on the right, a value's bin being the number of interior
/// edges `j / bins` (computed as `j * (1 / bins)`) strictly below it. Empty bins are left out.
pub fn reliability_bins(is_positive: &[bool], p_positive: &[f64], bins: usize) -> Vec<ReliabilityBin> {
    let mut count = vec![0usize; bins];
    let mut predicted = vec![0.0; bins];
    let mut observed = vec![0.0; bins];
    let step = 1.0 / bins as f64;
    for (&y, &p) in is_positive.iter().zip(p_positive) {
        let b = (1..bins).filter(|&j| (j as f64 * step) < p).count();
        count[b] += 1;
        predicted[b] += p;
        observed[b] += y as u8 as f64;
    }
    (0..bins)
        .filter(|&b| count[b] > 0)
        .map(|b| ReliabilityBin {
            lower: b as f64 / bins as f64,
            upper: (b + 1) as f64 / bins as f64,
            count: count[b],
            mean_predicted: predicted[b] / count[b] as f64,
            observed: observed[b] / count[b] as f64,
        })
        .collect()
}
