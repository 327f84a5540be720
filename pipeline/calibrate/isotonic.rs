//! Isotonic regression as a calibration map (Zadrozny & Elkan 2002, "Transforming classifier
//! scores into accurate multiclass probability estimates"): the non-decreasing fit of 0/1 targets
//! on a score by pool-adjacent-violators, predicted by linear interpolation between the fitted
//! points and clipped to the end values outside them. It follows scikit-learn's
//! `IsotonicRegression(out_of_bounds="clip")` step by step: rows sorted by score, equal scores
//! (within 1e-15 of a run's first) pooled into their mean target with their count as weight,
//! then the same single-pass PAV.

/// A fitted isotonic map: distinct scores, ascending, and the fitted value at each.
#[derive(Debug, Clone, PartialEq)]
pub struct Isotonic {
    pub thresholds: Vec<f64>,
    pub values: Vec<f64>,
}

/// Scores closer than this to a run's first score count as equal (numpy's float64 resolution,
/// as scikit-learn's `_make_unique` uses).
const RESOLUTION: f64 = 1e-15;

/// Pool-adjacent-violators on `y` with weights `w`, in place (scikit-learn's
/// `_inplace_contiguous_isotonic_regression`): blocks are tracked by their two ends, and a
/// violation merges the decreasing run and backtracks one block.
fn pool_adjacent_violators(y: &mut [f64], w: &mut [f64]) {
    let n = y.len();
    if n == 0 {
        return;
    }
    let mut target: Vec<usize> = (0..n).collect();
    let mut i = 0;
    while i < n {
        let mut k = target[i] + 1;
        if k == n {
            break;
        }
        if y[i] < y[k] {
            i = k;
            continue;
        }
        let mut sum_wy = w[i] * y[i];
        let mut sum_w = w[i];
        loop {
            let prev_y = y[k];
            sum_wy += w[k] * y[k];
            sum_w += w[k];
            k = target[k] + 1;
            if k == n || prev_y < y[k] {
                y[i] = sum_wy / sum_w;
                w[i] = sum_w;
                target[i] = k - 1;
                target[k - 1] = i;
                if i > 0 {
                    i = target[i - 1];
                }
                break;
            }
        }
    }
    let mut i = 0;
    while i < n {
        let k = target[i] + 1;
        let v = y[i];
        y[i + 1..k].iter_mut().for_each(|x| *x = v);
        i = k;
    }
}

impl Isotonic {
    /// Fits the map of `scores` to `targets` (0 or 1, or any value).
    pub fn fit(scores: &[f64], targets: &[f64]) -> Isotonic {
        let mut order: Vec<usize> = (0..scores.len()).collect();
        // numpy's lexsort((y, X)): by score, then by target.
        order.sort_by(|&a, &b| scores[a].total_cmp(&scores[b]).then(targets[a].total_cmp(&targets[b])));
        let (mut xs, mut ys, mut ws) = (Vec::new(), Vec::new(), Vec::new());
        let mut iter = order.iter();
        if let Some(&first) = iter.next() {
            let (mut current_x, mut sum_y, mut weight) = (scores[first], targets[first], 1.0);
            for &j in iter {
                if scores[j] - current_x >= RESOLUTION {
                    xs.push(current_x);
                    ys.push(sum_y / weight);
                    ws.push(weight);
                    (current_x, sum_y, weight) = (scores[j], targets[j], 1.0);
                } else {
                    sum_y += targets[j];
                    weight += 1.0;
                }
            }
            xs.push(current_x);
            ys.push(sum_y / weight);
            ws.push(weight);
        }
        pool_adjacent_violators(&mut ys, &mut ws);
        Isotonic { thresholds: xs, values: ys }
    }

    /// The fitted value at `score`: linear between the two surrounding thresholds (as scipy's
    /// `interp1d`, which scikit-learn predicts with), the end value outside them.
    pub fn predict(&self, score: f64) -> f64 {
        let (x, y) = (&self.thresholds, &self.values);
        match x.len() {
            0 => f64::NAN,
            1 => y[0],
            n => {
                let s = score.clamp(x[0], x[n - 1]);
                // interp1d: the first threshold not below s, kept within 1..n-1.
                let hi = x.partition_point(|&t| t < s).clamp(1, n - 1);
                let lo = hi - 1;
                let slope = (y[hi] - y[lo]) / (x[hi] - x[lo]);
                slope * (s - x[lo]) + y[lo]
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn pooling_makes_the_fit_non_decreasing() {
        let fit = Isotonic::fit(&[1.0, 2.0, 3.0, 4.0], &[0.0, 1.0, 0.0, 1.0]);
        assert_eq!(fit.values, vec![0.0, 0.5, 0.5, 1.0]);
        assert_eq!(fit.predict(0.0), 0.0);
        assert_eq!(fit.predict(9.0), 1.0);
        assert_eq!(fit.predict(3.5), 0.75);
    }

    #[test]
    fn equal_scores_are_one_point() {
        let fit = Isotonic::fit(&[1.0, 1.0, 1.0, 2.0], &[0.0, 1.0, 1.0, 1.0]);
        assert_eq!(fit.thresholds, vec![1.0, 2.0]);
        assert_eq!(fit.values, vec![2.0 / 3.0, 1.0]);
    }
}
