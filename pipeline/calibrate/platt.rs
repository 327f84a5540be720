//! Platt scaling (Platt 1999, "Probabilistic outputs for support vector machines and comparisons
//! to regularized likelihood methods"): p = 1 / (1 + exp(-(a z + b))) on the logit z, fitted by
//! log loss against Platt's smoothed targets, (N+ + 1) / (N+ + 2) for positive rows and
//! 1 / (N- + 2) for negative ones. Minimised by Newton's method with a backtracking line search,
//! the way Lin, Lin & Weng (2007, "A note on Platt's probabilistic outputs for support vector
//! machines", Machine Learning 68) made the original fit numerically safe.

/// Log loss terms without overflow: log(1 + e^x).
fn softplus(x: f64) -> f64 {
    if x > 0.0 {
        x + libm::log1p(libm::exp(-x))
    } else {
        libm::log1p(libm::exp(x))
    }
}

/// The calibrated probability of the positive class.
pub fn probability(a: f64, b: f64, z: f64) -> f64 {
    let s = a * z + b;
    if s >= 0.0 {
        1.0 / (1.0 + libm::exp(-s))
    } else {
        let e = libm::exp(s);
        e / (1.0 + e)
    }
}

/// Platt's smoothed targets for binary labels (1 = positive).
pub fn smoothed_targets(labels: &[usize]) -> Vec<f64> {
    let positives = labels.iter().filter(|&&y| y == 1).count() as f64;
    let negatives = labels.len() as f64 - positives;
    let (hi, lo) = ((positives + 1.0) / (positives + 2.0), 1.0 / (negatives + 2.0));
    labels.iter().map(|&y| if y == 1 { hi } else { lo }).collect()
}

/// The objective: sum of t log(1/p) + (1 - t) log(1/(1 - p)) over rows.
pub fn objective(a: f64, b: f64, logits: &[f64], targets: &[f64]) -> f64 {
    logits
        .iter()
        .zip(targets)
        .map(|(&z, &t)| {
            let s = a * z + b;
            t * softplus(-s) + (1.0 - t) * softplus(s)
        })
        .sum()
}

/// (a, b) minimising [`objective`] with Platt's smoothed targets of `labels`.
pub fn fit(logits: &[f64], labels: &[usize]) -> (f64, f64) {
    let targets = smoothed_targets(labels);
    let positives = labels.iter().filter(|&&y| y == 1).count() as f64;
    let negatives = labels.len() as f64 - positives;
    // Platt's start: no slope, the prior log odds of the smoothed counts.
    let (mut a, mut b) = (0.0, libm::log((positives + 1.0) / (negatives + 1.0)));
    let mut value = objective(a, b, logits, &targets);
    for _ in 0..200 {
        let (mut ga, mut gb, mut haa, mut hab, mut hbb) = (0.0, 0.0, 0.0, 0.0, 0.0);
        for (&z, &t) in logits.iter().zip(&targets) {
            let p = probability(a, b, z);
            let w = p * (1.0 - p);
            ga += (p - t) * z;
            gb += p - t;
            haa += w * z * z;
            hab += w * z;
            hbb += w;
        }
        // A tiny ridge keeps the Hessian invertible (Lin, Lin & Weng 2007 use 1e-12).
        haa += 1e-12;
        hbb += 1e-12;
        let det = haa * hbb - hab * hab;
        let (da, db) = (-(hbb * ga - hab * gb) / det, -(-hab * ga + haa * gb) / det);
        let decrease = ga * da + gb * db;
        let mut step = 1.0;
        let mut moved = false;
        while step >= 1e-10 {
            let (na, nb) = (a + step * da, b + step * db);
            let nv = objective(na, nb, logits, &targets);
            if nv <= value + 1e-4 * step * decrease {
                moved = (na, nb) != (a, b);
                (a, b, value) = (na, nb, nv);
                break;
            }
            step *= 0.5;
        }
        if !moved || ga.abs().max(gb.abs()) <= 1e-12 * labels.len() as f64 {
            break;
        }
    }
    (a, b)
}
