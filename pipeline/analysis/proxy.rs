//! The proxy check: how well the network's inputs predict a group column the network never sees.
//! A linear probe (logistic regression, one against the rest for more than two groups), fitted
//! on the training rows' encoded inputs by Newton's method with a small ridge, is scored on the
//! test rows by ROC AUC (macro one-against-the-rest for more than two groups) with a bootstrap
//! interval. Near 0.5 the inputs say little about the group; near 1 they reveal it, and a
//! network can then treat groups differently without being given the column.

use serde::{Deserialize, Serialize};

use crate::data::prep::Matrix;
use crate::metrics::bootstrap::{percentile_intervals, ResampleOrder};
use crate::metrics::classification::{macro_ovr_auc, roc_auc};
use crate::metrics::MetricSet;

/// The ridge on the probe's weights (not its intercept), on the scale of the summed log loss.
const RIDGE: f64 = 1.0;
const MAX_NEWTON_STEPS: usize = 50;
/// Wider inputs are not probed (the Newton step solves a system of this size).
pub(crate) const MAX_PROBE_INPUTS: usize = 400;

/// One group column's proxy check.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ProxyCheck {
    pub column: String,
    /// Distinct groups on the training rows (a null is its own group).
    pub groups: usize,
    pub inputs: usize,
    pub train_rows: usize,
    pub test_rows: usize,
    /// Test ROC AUC of the probe (macro one-against-the-rest for more than two groups) and its
    /// 95% bootstrap interval; `None` when a group is missing from the test rows.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub roc_auc: Option<super::estimate::Estimate>,
}

fn sigmoid(s: f64) -> f64 {
    if s >= 0.0 {
        1.0 / (1.0 + libm::exp(-s))
    } else {
        let e = libm::exp(s);
        e / (1.0 + e)
    }
}

/// Solves `a x = b` for a symmetric positive definite `a` (n x n, row-major) by Cholesky.
fn solve_spd(a: &[f64], b: &[f64], n: usize) -> Option<Vec<f64>> {
    let mut l = vec![0.0; n * n];
    for i in 0..n {
        for j in 0..=i {
            let sum: f64 = (0..j).map(|k| l[i * n + k] * l[j * n + k]).sum();
            if i == j {
                let d = a[i * n + i] - sum;
                if d <= 0.0 {
                    return None;
                }
                l[i * n + i] = d.sqrt();
            } else {
                l[i * n + j] = (a[i * n + j] - sum) / l[j * n + j];
            }
        }
    }
    let mut y = vec![0.0; n];
    for i in 0..n {
        y[i] = (b[i] - (0..i).map(|k| l[i * n + k] * y[k]).sum::<f64>()) / l[i * n + i];
    }
    let mut x = vec![0.0; n];
    for i in (0..n).rev() {
        x[i] = (y[i] - (i + 1..n).map(|k| l[k * n + i] * x[k]).sum::<f64>()) / l[i * n + i];
    }
    Some(x)
}

/// Weights (one per input, then the intercept) of a ridge logistic regression of `target` on `x`.
pub(crate) fn fit_probe(x: &Matrix, target: &[bool]) -> Vec<f64> {
    let d = x.cols + 1;
    let mut w = vec![0.0; d];
    let row = |i: usize| x.data[i * x.cols..(i + 1) * x.cols].iter().map(|&v| f64::from(v)).chain([1.0]);
    for _ in 0..MAX_NEWTON_STEPS {
        let mut gradient = vec![0.0; d];
        let mut hessian = vec![0.0; d * d];
        for (i, &t) in target.iter().enumerate() {
            let values: Vec<f64> = row(i).collect();
            let p = sigmoid(values.iter().zip(&w).map(|(a, b)| a * b).sum());
            let (residual, weight) = (p - t as u8 as f64, p * (1.0 - p));
            for a in 0..d {
                gradient[a] += residual * values[a];
                let wa = weight * values[a];
                for b in 0..=a {
                    hessian[a * d + b] += wa * values[b];
                }
            }
        }
        for a in 0..d {
            for b in 0..a {
                hessian[b * d + a] = hessian[a * d + b];
            }
            if a + 1 < d {
                gradient[a] += RIDGE * w[a];
                hessian[a * d + a] += RIDGE;
            } else {
                hessian[a * d + a] += 1e-9;
            }
        }
        let Some(step) = solve_spd(&hessian, &gradient, d) else { break };
        w.iter_mut().zip(&step).for_each(|(wi, s)| *wi -= s);
        if step.iter().fold(0.0f64, |m, s| m.max(s.abs())) < 1e-10 {
            break;
        }
    }
    w
}

fn score(x: &Matrix, w: &[f64]) -> Vec<f64> {
    (0..x.rows)
        .map(|i| {
            let z: f64 = x.data[i * x.cols..(i + 1) * x.cols].iter().zip(w).map(|(&v, b)| f64::from(v) * b).sum::<f64>() + w[x.cols];
            sigmoid(z)
        })
        .collect()
}

/// The proxy check of one group column: `train_groups` and `test_groups` are the group of each
/// training and test row, in the rows' order of `train_x` and `test_x`.
pub(crate) fn check(
    column: &str,
    (train_x, train_groups): (&Matrix, &[String]),
    (test_x, test_groups): (&Matrix, &[String]),
    resamples: usize,
    seed: u64,
) -> ProxyCheck {
    let mut levels: Vec<&String> = train_groups.iter().collect();
    levels.sort();
    levels.dedup();
    let k = levels.len();
    let index = |g: &String| levels.iter().position(|l| *l == g);
    let test_labels: Vec<Option<usize>> = test_groups.iter().map(index).collect();
    let mut out = ProxyCheck {
        column: column.into(),
        groups: k,
        inputs: train_x.cols,
        train_rows: train_x.rows,
        test_rows: test_x.rows,
        roc_auc: None,
    };
    if k < 2 || train_x.cols > MAX_PROBE_INPUTS || test_labels.iter().any(Option::is_none) {
        return out;
    }
    let test_labels: Vec<usize> = test_labels.into_iter().flatten().collect();
    // Two groups: one probe for the second; more: one probe per group against the rest.
    let probes: Vec<usize> = if k == 2 { vec![1] } else { (0..k).collect() };
    let scores: Vec<Vec<f64>> = probes
        .iter()
        .map(|&c| {
            let target: Vec<bool> = train_groups.iter().map(|g| index(g) == Some(c)).collect();
            score(test_x, &fit_probe(train_x, &target))
        })
        .collect();
    let auc = |idx: &[usize]| -> MetricSet {
        let y: Vec<usize> = idx.iter().map(|&i| test_labels[i]).collect();
        let value = if k == 2 {
            let positive: Vec<bool> = y.iter().map(|&c| c == 1).collect();
            roc_auc(&positive, &idx.iter().map(|&i| scores[0][i]).collect::<Vec<_>>())
        } else {
            let probs: Vec<f64> = idx.iter().flat_map(|&i| scores.iter().map(move |s| s[i])).collect();
            macro_ovr_auc(&y, &probs, k)
        };
        MetricSet::from([("roc_auc".to_string(), value)])
    };
    let all: Vec<usize> = (0..test_labels.len()).collect();
    if let Some(Some(value)) = auc(&all).get("roc_auc") {
        // Row order gives the draw order's bits: below `ranked::MAX_ROWS` rows ROC AUC sums each
        // tie group's exact ranks, whatever order the rows come in.
        let interval = percentile_intervals(test_labels.len(), resamples, 0.95, seed, ResampleOrder::Rows, auc);
        let (lower, upper) = interval.get("roc_auc").map_or((*value, *value), |i| (i.lower, i.upper));
        out.roc_auc = Some(super::estimate::Estimate { value: *value, lower, upper });
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_probe_finds_a_group_the_inputs_reveal_and_not_one_they_do_not() {
        // Input 0 equals the group (plus noise); input 1 is noise.
        let mut stream = crate::rng::Stream::new(3, crate::rng::Purpose::DemoData);
        let mut rows = |n: usize| {
            let mut data = Vec::new();
            let mut revealed = Vec::new();
            let mut hidden = Vec::new();
            for _ in 0..n {
                let g = stream.uniform() < 0.4;
                let h = stream.uniform() < 0.5;
                data.extend([g as u8 as f32 + stream.uniform_f32() - 0.5, stream.uniform_f32()]);
                revealed.push(if g { "b" } else { "a" }.to_string());
                hidden.push(if h { "y" } else { "x" }.to_string());
            }
            (Matrix { rows: n, cols: 2, data }, revealed, hidden)
        };
        let (train, train_revealed, train_hidden) = rows(800);
        let (test, test_revealed, test_hidden) = rows(400);
        let found = check("revealed", (&train, &train_revealed), (&test, &test_revealed), 200, 1).roc_auc.unwrap();
        assert!(found.lower > 0.8, "{found:?}");
        let not_found = check("hidden", (&train, &train_hidden), (&test, &test_hidden), 200, 1).roc_auc.unwrap();
        assert!(not_found.lower < 0.5 && not_found.upper > 0.5, "{not_found:?}");
    }
}
