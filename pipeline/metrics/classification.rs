//! Classification metrics. Probabilities are row-major `n x k` (k >= 2; a binary model's rows are
//! `[1 - p, p]`); labels are class indices. The predicted class is the arg-max, first index winning
//! ties, so a binary prediction is positive when p > 0.5.

use super::ranked::{group_rank, stable_order, RowIndex};

/// Per-class precision, recall, F1 and support; a zero denominator gives 0 (as scikit-learn's
/// `zero_division=0`).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ClassReport {
    pub precision: f64,
    pub recall: f64,
    pub f1: f64,
    pub support: usize,
}

pub fn argmax(row: &[f64]) -> usize {
    let mut best = 0;
    for (i, &v) in row.iter().enumerate() {
        if v > row[best] {
            best = i;
        }
    }
    best
}

pub fn predicted_classes(probs: &[f64], k: usize) -> Vec<usize> {
    probs.chunks_exact(k).map(argmax).collect()
}

/// `matrix[true][predicted]`.
pub fn confusion_matrix(labels: &[usize], predicted: &[usize], k: usize) -> Vec<Vec<usize>> {
    let mut m = vec![vec![0usize; k]; k];
    for (&t, &p) in labels.iter().zip(predicted) {
        m[t][p] += 1;
    }
    m
}

pub fn accuracy(labels: &[usize], predicted: &[usize]) -> Option<f64> {
    if labels.is_empty() {
        return None;
    }
    let hits = labels.iter().zip(predicted).filter(|(t, p)| t == p).count();
    Some(hits as f64 / labels.len() as f64)
}

/// Mean recall over the classes present in `labels`.
pub fn balanced_accuracy(labels: &[usize], predicted: &[usize], k: usize) -> Option<f64> {
    balanced_accuracy_of(&confusion_matrix(labels, predicted, k))
}

/// Balanced accuracy from the confusion matrix `m[true][predicted]`.
pub fn balanced_accuracy_of(m: &[Vec<usize>]) -> Option<f64> {
    let k = m.len();
    let recalls: Vec<f64> = (0..k)
        .filter_map(|c| {
            let support: usize = m[c].iter().sum();
            (support > 0).then(|| m[c][c] as f64 / support as f64)
        })
        .collect();
    (!recalls.is_empty()).then(|| recalls.iter().sum::<f64>() / recalls.len() as f64)
}

pub fn per_class(labels: &[usize], predicted: &[usize], k: usize) -> Vec<ClassReport> {
    let m = confusion_matrix(labels, predicted, k);
    let ratio = |a: usize, b: usize| if b == 0 { 0.0 } else { a as f64 / b as f64 };
    (0..k)
        .map(|c| {
            let tp = m[c][c];
            let support: usize = m[c].iter().sum();
            let predicted_c: usize = (0..k).map(|t| m[t][c]).sum();
            let precision = ratio(tp, predicted_c);
            let recall = ratio(tp, support);
            let f1 = if precision + recall == 0.0 { 0.0 } else { 2.0 * precision * recall / (precision + recall) };
            ClassReport { precision, recall, f1, support }
        })
        .collect()
}

/// Mean negative log-likelihood; probabilities are clipped to [eps, 1 - eps] with eps the f64
/// machine epsilon and each row renormalised, as scikit-learn's `log_loss` does.
pub fn log_loss(labels: &[usize], probs: &[f64], k: usize) -> Option<f64> {
    if labels.is_empty() {
        return None;
    }
    log_loss_of_terms(probs.chunks_exact(k).zip(labels).map(|(row, &y)| log_loss_term(row, y)), labels.len())
}

/// One row's log-loss term: the natural log of the clipped probability of class `y` over the sum
/// of the row's clipped probabilities (minus the row's loss).
pub fn log_loss_term(row: &[f64], y: usize) -> f64 {
    let eps = f64::EPSILON;
    let sum: f64 = row.iter().map(|p| p.clamp(eps, 1.0 - eps)).sum();
    libm::log(row[y].clamp(eps, 1.0 - eps) / sum)
}

/// Log loss of `rows` rows from their [`log_loss_term`]s, subtracted in the order given.
pub fn log_loss_of_terms(terms: impl Iterator<Item = f64>, rows: usize) -> Option<f64> {
    if rows == 0 {
        return None;
    }
    let mut total = 0.0;
    for term in terms {
        total -= term;
    }
    Some(total / rows as f64)
}

/// Brier score: for two classes the mean of (p - y)^2 on the positive class; for more, the mean
/// over rows of the squared distance between the probability vector and the one-hot label.
pub fn brier(labels: &[usize], probs: &[f64], k: usize) -> Option<f64> {
    if labels.is_empty() {
        return None;
    }
    let total: f64 = probs.chunks_exact(k).zip(labels).map(|(r, &y)| brier_term(r, y)).sum();
    Some(total / labels.len() as f64)
}

/// One row's Brier term: for two classes (p - y)^2 on the positive class; for more, the squared
/// distance between the row's probabilities and the one-hot label.
pub fn brier_term(row: &[f64], y: usize) -> f64 {
    if row.len() == 2 {
        (row[1] - (y == 1) as u8 as f64).powi(2)
    } else {
        row.iter().enumerate().map(|(c, p)| (p - (c == y) as u8 as f64).powi(2)).sum::<f64>()
    }
}

/// [`stable_order`] passed to `walk`, in `u32` indices where every row fits.
fn with_order<R>(scores: &[f64], descending: bool, walk: impl FnOnce(&mut dyn Iterator<Item = usize>) -> R) -> R {
    if u32::try_from(scores.len()).is_ok() {
        walk(&mut stable_order::<u32>(scores, descending).into_iter().map(RowIndex::at))
    } else {
        walk(&mut stable_order::<usize>(scores, descending).into_iter())
    }
}

/// Ranks 1..n of `scores`, tied scores sharing their average rank.
fn average_ranks(scores: &[f64]) -> Vec<f64> {
    let mut ranks = vec![0.0; scores.len()];
    walk_tie_groups(scores, |start, group| {
        let rank = group_rank(start as u64, group.len() as u64);
        for &idx in group {
            ranks[idx] = rank;
        }
    });
    ranks
}

/// Each run of tied scores in ascending order, as (its first position, its row indices).
fn walk_tie_groups(scores: &[f64], mut each: impl FnMut(usize, &[usize])) {
    with_order(scores, false, |order| {
        let mut run: Vec<usize> = Vec::new();
        let mut start = 0;
        for (position, idx) in order.enumerate() {
            if run.first().is_some_and(|&first| scores[idx] != scores[first]) {
                each(start, &run);
                run.clear();
                start = position;
            }
            run.push(idx);
        }
        if !run.is_empty() {
            each(start, &run);
        }
    });
}

/// ROC AUC as the Mann-Whitney U statistic over (positive, negative) pairs, ties counting one half.
/// `None` when either class is absent.
pub fn roc_auc(is_positive: &[bool], scores: &[f64]) -> Option<f64> {
    let n_pos = is_positive.iter().filter(|&&p| p).count();
    let n_neg = is_positive.len() - n_pos;
    if n_pos == 0 || n_neg == 0 {
        return None;
    }
    let rank_sum: f64 = if scores.len() <= super::ranked::MAX_ROWS {
        // Every rank is half a whole number and every partial sum stays below 2^53, so each sum
        // is exact and its order does not matter: the tie groups' sums, walked in score order,
        // give the bits of the sum in row order without a rank per row.
        let mut sum = 0.0;
        walk_tie_groups(scores, |start, group| {
            sum += group_rank(start as u64, group.len() as u64) * group.iter().filter(|&&idx| is_positive[idx]).count() as f64;
        });
        sum
    } else {
        average_ranks(scores).iter().zip(is_positive).filter(|(_, &p)| p).map(|(r, _)| r).sum()
    };
    let u = rank_sum - (n_pos * (n_pos + 1)) as f64 / 2.0;
    Some(u / (n_pos as f64 * n_neg as f64))
}

/// Cumulative counts at one distinct score, walking the scores from highest to lowest: how many
/// positives and negatives score at or above `threshold`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ThresholdStep {
    pub threshold: f64,
    pub true_positives: usize,
    pub false_positives: usize,
}

/// One [`ThresholdStep`] per distinct score, highest first, tied scores entering together,
/// handed to `each` one at a time (no list of them is kept: over millions of distinct scores it
/// would outweigh the scores).
pub fn walk_threshold_steps(is_positive: &[bool], scores: &[f64], mut each: impl FnMut(ThresholdStep)) {
    with_order(scores, true, |order| {
        let (mut tp, mut fp) = (0usize, 0usize);
        let mut current: Option<f64> = None;
        for idx in order {
            let score = scores[idx];
            if let Some(threshold) = current.filter(|&t| t != score) {
                each(ThresholdStep { threshold, true_positives: tp, false_positives: fp });
            }
            current = Some(score);
            if is_positive[idx] {
                tp += 1;
            } else {
                fp += 1;
            }
        }
        if let Some(threshold) = current {
            each(ThresholdStep { threshold, true_positives: tp, false_positives: fp });
        }
    });
}

/// Average precision: sum over distinct thresholds (descending) of (R_i - R_{i-1}) * P_i, the
/// step-wise area under the precision-recall curve (scikit-learn's `average_precision_score`).
pub fn average_precision(is_positive: &[bool], scores: &[f64]) -> Option<f64> {
    let n_pos = is_positive.iter().filter(|&&p| p).count();
    if n_pos == 0 {
        return None;
    }
    let (mut last_recall, mut ap) = (0.0, 0.0);
    walk_threshold_steps(is_positive, scores, |step| {
        let recall = step.true_positives as f64 / n_pos as f64;
        let precision = step.true_positives as f64 / (step.true_positives + step.false_positives) as f64;
        ap += (recall - last_recall) * precision;
        last_recall = recall;
    });
    Some(ap)
}

/// One-vs-rest ROC AUC per class, averaged over the classes where it is defined (macro).
pub fn macro_ovr_auc(labels: &[usize], probs: &[f64], k: usize) -> Option<f64> {
    let aucs: Vec<f64> = (0..k)
        .filter_map(|c| {
            let is_c: Vec<bool> = labels.iter().map(|&y| y == c).collect();
            let scores: Vec<f64> = probs.chunks_exact(k).map(|r| r[c]).collect();
            roc_auc(&is_c, &scores)
        })
        .collect();
    (!aucs.is_empty()).then(|| aucs.iter().sum::<f64>() / aucs.len() as f64)
}

/// A threshold with the true- and false-positive rates of predicting positive for p >= threshold.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OperatingPoint {
    pub threshold: f64,
    pub true_positive_rate: f64,
    pub false_positive_rate: f64,
}

/// The threshold t maximising Youden's J = TPR - FPR when predicting positive for p >= t
/// (Youden 1950, "Index for rating diagnostic tests"), over the distinct scores; the highest
/// such t on ties. `None` without both classes.
pub fn youden_threshold(is_positive: &[bool], scores: &[f64]) -> Option<OperatingPoint> {
    let n_pos = is_positive.iter().filter(|&&p| p).count();
    let n_neg = is_positive.len() - n_pos;
    if n_pos == 0 || n_neg == 0 {
        return None;
    }
    let mut best: Option<(f64, OperatingPoint)> = None;
    walk_threshold_steps(is_positive, scores, |step| {
        let (tpr, fpr) = (step.true_positives as f64 / n_pos as f64, step.false_positives as f64 / n_neg as f64);
        if best.is_none_or(|(j, _)| tpr - fpr > j) {
            best = Some((tpr - fpr, OperatingPoint { threshold: step.threshold, true_positive_rate: tpr, false_positive_rate: fpr }));
        }
    });
    best.map(|(_, point)| point)
}

/// The true- and false-positive rates of predicting positive for p >= `threshold`; `None`
/// without both classes.
pub fn operating_point_at(is_positive: &[bool], scores: &[f64], threshold: f64) -> Option<OperatingPoint> {
    let n_pos = is_positive.iter().filter(|&&p| p).count();
    let n_neg = is_positive.len() - n_pos;
    if n_pos == 0 || n_neg == 0 {
        return None;
    }
    let (mut tp, mut fp) = (0usize, 0usize);
    for (&positive, &p) in is_positive.iter().zip(scores) {
        if p >= threshold {
            if positive {
                tp += 1;
            } else {
                fp += 1;
            }
        }
    }
    Some(OperatingPoint { threshold, true_positive_rate: tp as f64 / n_pos as f64, false_positive_rate: fp as f64 / n_neg as f64 })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// ROC AUC from its tie groups has the bits of the rank sum taken row by row (the form it
    /// replaced), on scores with many ties and both zeros.
    #[test]
    fn auc_from_tie_groups_has_the_bits_of_the_row_order_rank_sum() {
        let mut state = 0x2545_F491_4F6C_DD1Du64;
        let mut next = || {
            state ^= state << 13;
            state ^= state >> 7;
            state ^= state << 17;
            state
        };
        for n in [2usize, 3, 10, 257, 5_000, 60_000] {
            let scores: Vec<f64> = (0..n)
                .map(|_| match next() % 5 {
                    0 => 0.0,
                    1 => -0.0,
                    2 => (next() % 7) as f64 / 7.0,
                    _ => (next() >> 11) as f64 / (1u64 << 53) as f64,
                })
                .collect();
            let positive: Vec<bool> = (0..n).map(|i| i == 0 || (i > 1 && next() % 3 == 0)).collect();
            let n_pos = positive.iter().filter(|&&p| p).count();
            let rank_sum: f64 = average_ranks(&scores).iter().zip(&positive).filter(|(_, &p)| p).map(|(r, _)| r).sum();
            let want = (rank_sum - (n_pos * (n_pos + 1)) as f64 / 2.0) / (n_pos as f64 * (n - n_pos) as f64);
            assert_eq!(roc_auc(&positive, &scores).map(f64::to_bits), Some(want.to_bits()), "{n} rows");
        }
    }

    #[test]
    fn single_class_auc_is_undefined_not_a_panic() {
        assert_eq!(roc_auc(&[true, true], &[0.1, 0.9]), None);
        assert_eq!(average_precision(&[false, false], &[0.1, 0.9]), None);
        assert_eq!(
            youden_threshold(&[false, true], &[0.3, 0.3]),
            Some(OperatingPoint { threshold: 0.3, true_positive_rate: 1.0, false_positive_rate: 1.0 })
        );
    }

    #[test]
    fn constant_scores_give_auc_one_half() {
        assert_eq!(roc_auc(&[true, false, true, false], &[0.3; 4]), Some(0.5));
    }
}
