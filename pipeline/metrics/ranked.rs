//! Rank metrics of bootstrap resamples in linear time. A resample draws rows of one sample with
//! replacement, so it is the sample's rows with counts; sorting the sample's scores once gives
//! every resample's order. A resample's rows are counted straight into their places in that
//! order ([`Ranking::place`]), and ROC AUC and average precision walk the sample's tie groups
//! front to back, weighting each by those counts, instead of sorting the resample's scores again.
//!
//! The bits are those of [`super::classification::roc_auc`] and
//! [`super::classification::average_precision`] on the resample's rows:
//! - ROC AUC sums average ranks, which are halves of whole numbers. Every partial sum is exact in
//!   f64 while the rank sum stays below 2^53, so its order does not matter; [`Ranking::new`]
//!   refuses samples where it could exceed that (about 94 million rows), and the caller sorts.
//! - Average precision walks the distinct scores from the highest, with whole-number counts, in
//!   the order the sorting form walks them, and does the same floating-point operations.
//!
//! The order of a sample by score ([`stable_order`]) is the one the sorting forms use too.

/// An index into the scores: `u32` where every row fits (half the memory of `usize` over
/// millions of rows), `usize` otherwise.
pub(crate) trait RowIndex: Copy {
    fn of(i: usize) -> Self;
    fn at(self) -> usize;
}

impl RowIndex for u32 {
    fn of(i: usize) -> Self {
        i as u32
    }
    fn at(self) -> usize {
        self as usize
    }
}

impl RowIndex for usize {
    fn of(i: usize) -> Self {
        i
    }
    fn at(self) -> usize {
        self
    }
}

/// The row indices in the stable order of `scores` by `f64::total_cmp` (ascending, or
/// descending): the same permutation whatever the index type. `I` must hold every index.
pub(crate) fn stable_order<I: RowIndex>(scores: &[f64], descending: bool) -> Vec<I> {
    let mut order: Vec<I> = (0..scores.len()).map(I::of).collect();
    if descending {
        order.sort_by(|&a, &b| scores[b.at()].total_cmp(&scores[a.at()]));
    } else {
        order.sort_by(|&a, &b| scores[a.at()].total_cmp(&scores[b.at()]));
    }
    order
}

/// The average of ranks `start + 1 ..= start + len`, the rank each row of a tie group gets:
/// `start + (len + 1) / 2`, half a whole number, exact below 2^53 (an empty group gives
/// `start + 1/2`, which the walks below multiply by no rows).
pub(crate) fn group_rank(start: u64, len: u64) -> f64 {
    (2 * start + len + 1) as f64 * 0.5
}

/// One sample's rows ordered by score, with its tie groups (runs of equal scores).
#[derive(Debug, Clone)]
pub struct Ranking {
    /// Each row's place in the order by ascending score (`f64::total_cmp`, as the sorting forms
    /// order them).
    place_of_row: Vec<u32>,
    /// Where each tie group starts in that order, then the number of rows.
    starts: Vec<u32>,
    /// Whether the row at each place is positive.
    positive: Vec<bool>,
}

/// The most rows a ranking takes: the largest rank sum, n(n + 1)/2, stays below 2^53, where every
/// sum of halves of whole numbers is exact.
pub const MAX_ROWS: usize = 94_906_265;

impl Ranking {
    /// The ranking of `scores` with each row's class (`positive`); `None` beyond [`MAX_ROWS`].
    pub fn new(positive: Vec<bool>, scores: &[f64]) -> Option<Self> {
        if scores.len() > MAX_ROWS || positive.len() != scores.len() {
            return None;
        }
        let order: Vec<u32> = stable_order(scores, false);
        let mut starts = Vec::new();
        let mut i = 0;
        while i < order.len() {
            starts.push(i as u32);
            let first = scores[order[i] as usize];
            // Equal as the sorting forms compare them (`==`: -0.0 ties with 0.0).
            while i < order.len() && scores[order[i] as usize] == first {
                i += 1;
            }
        }
        starts.push(order.len() as u32);
        let mut place_of_row = vec![0u32; order.len()];
        for (place, &row) in order.iter().enumerate() {
            place_of_row[row as usize] = place as u32;
        }
        let positive = order.iter().map(|&row| positive[row as usize]).collect();
        Some(Ranking { place_of_row, starts, positive })
    }

    /// How often the resample `rows` (sample rows, repeats allowed) holds the row at each place of
    /// the ranking: what [`Ranking::roc_auc`] and [`Ranking::average_precision`] read.
    pub fn place(&self, rows: &[usize]) -> Vec<u32> {
        let mut counts = vec![0u32; self.place_of_row.len()];
        for &r in rows {
            counts[self.place_of_row[r] as usize] += 1;
        }
        counts
    }

    /// Calls `f` with each tie group's (rows, positives) in the resample with `counts` per place,
    /// lowest scores first (or highest, `descending`). Groups the resample does not draw come as
    /// (0, 0): the walks below add exact zeros for them, so they need no branch that the draws
    /// would make unpredictable.
    fn each_group(&self, counts: &[u32], descending: bool, f: impl FnMut(u64, u64)) {
        fn walk(groups: impl DoubleEndedIterator<Item = (u64, u64)>, descending: bool, mut f: impl FnMut(u64, u64)) {
            if descending {
                groups.rev().for_each(|(rows, pos)| f(rows, pos));
            } else {
                groups.for_each(|(rows, pos)| f(rows, pos));
            }
        }
        let positives = |c: u32, positive: bool| if positive { c as u64 } else { 0 };
        if self.starts.len() == counts.len() + 1 {
            // No ties: each place is a group of its own.
            walk(counts.iter().zip(&self.positive).map(|(&c, &p)| (c as u64, positives(c, p))), descending, f);
        } else {
            let groups = self.starts.windows(2).map(|w| {
                let group = w[0] as usize..w[1] as usize;
                counts[group.clone()]
                    .iter()
                    .zip(&self.positive[group])
                    .fold((0u64, 0u64), |(rows, pos), (&c, &p)| (rows + c as u64, pos + positives(c, p)))
            });
            walk(groups, descending, f);
        }
    }

    /// ROC AUC of the resample with `counts` per place ([`Ranking::place`]), as
    /// [`super::classification::roc_auc`] gives it on its rows.
    pub fn roc_auc(&self, counts: &[u32]) -> Option<f64> {
        let (mut before, mut rank_sum, mut n_pos) = (0u64, 0.0f64, 0u64);
        self.each_group(counts, false, |rows, positives| {
            // Every product and partial sum is exact (see MAX_ROWS), so an empty group adds an
            // exact zero.
            rank_sum += group_rank(before, rows) * positives as f64;
            before += rows;
            n_pos += positives;
        });
        let n_neg = before - n_pos;
        if n_pos == 0 || n_neg == 0 {
            return None;
        }
        let n_pos = n_pos as usize;
        let u = rank_sum - (n_pos * (n_pos + 1)) as f64 / 2.0;
        Some(u / (n_pos as f64 * n_neg as f64))
    }

    /// Average precision of the resample with `counts` per place ([`Ranking::place`]), as
    /// [`super::classification::average_precision`] gives it.
    pub fn average_precision(&self, counts: &[u32]) -> Option<f64> {
        let n_pos: u64 = counts.iter().zip(&self.positive).filter(|(_, &positive)| positive).map(|(&c, _)| c as u64).sum();
        if n_pos == 0 {
            return None;
        }
        let (mut tp, mut fp) = (0u64, 0u64);
        let (mut last_recall, mut ap) = (0.0f64, 0.0f64);
        self.each_group(counts, true, |rows, positives| {
            tp += positives;
            fp += rows - positives;
            // An empty group leaves the recall as it was, so it adds (0.0 x precision) = 0.0;
            // before the first drawn group tp + fp is 0, and the precision's divisor 1.
            let recall = tp as f64 / n_pos as f64;
            let precision = tp as f64 / (tp + fp).max(1) as f64;
            ap += (recall - last_recall) * precision;
            last_recall = recall;
        });
        Some(ap)
    }
}

/// The rankings a classifier's rank metrics need: binary, the positive class's probability;
/// multiclass, each class against the rest.
#[derive(Debug, Clone)]
pub struct ClassRankings {
    pub k: usize,
    pub per_class: Vec<Ranking>,
}

impl ClassRankings {
    /// `None` when the sample is too large to rank exactly ([`MAX_ROWS`]).
    pub fn new(labels: &[usize], probs: &[f64], k: usize) -> Option<Self> {
        let classes: Vec<usize> = if k == 2 { vec![1] } else { (0..k).collect() };
        let per_class = classes
            .into_iter()
            .map(|c| {
                let scores: Vec<f64> = probs.chunks_exact(k).map(|r| r[c]).collect();
                Ranking::new(labels.iter().map(|&y| y == c).collect(), &scores)
            })
            .collect::<Option<Vec<_>>>()?;
        Some(ClassRankings { k, per_class })
    }

    /// The resample `rows` counted into each ranking's places ([`Ranking::place`]).
    pub fn place(&self, rows: &[usize]) -> Vec<Vec<u32>> {
        self.per_class.iter().map(|r| r.place(rows)).collect()
    }

    /// Binary ROC AUC, or the macro one-vs-rest mean over the classes where it is defined (as
    /// [`super::classification::macro_ovr_auc`]), of the resample `placed` by [`ClassRankings::place`].
    pub fn roc_auc(&self, placed: &[Vec<u32>]) -> Option<f64> {
        if self.k == 2 {
            return self.per_class[0].roc_auc(&placed[0]);
        }
        let aucs: Vec<f64> = self.per_class.iter().zip(placed).filter_map(|(r, counts)| r.roc_auc(counts)).collect();
        (!aucs.is_empty()).then(|| aucs.iter().sum::<f64>() / aucs.len() as f64)
    }

    /// Binary average precision (`None` for more classes, which have none).
    pub fn average_precision(&self, placed: &[Vec<u32>]) -> Option<f64> {
        (self.k == 2).then(|| self.per_class[0].average_precision(&placed[0])).flatten()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::metrics::classification::{average_precision, macro_ovr_auc, roc_auc};
    use crate::rng::{Purpose, Stream};

    /// Scores on a coarse grid (many ties, a -0.0 beside 0.0), resampled with replacement: the
    /// counted forms give the sorting forms' bits on every resample.
    #[test]
    fn counted_rank_metrics_equal_the_sorting_forms_bit_for_bit() {
        let mut stream = Stream::new(7, Purpose::Bootstrap);
        let n = 400;
        let mut scores: Vec<f64> = (0..n).map(|_| (stream.below(37) as f64) / 36.0).collect();
        scores[3] = -0.0;
        scores[4] = 0.0;
        let labels: Vec<usize> = (0..n).map(|i| usize::from(stream.below(100) < 20 + (scores[i] * 60.0) as u64)).collect();
        let positive: Vec<bool> = labels.iter().map(|&y| y == 1).collect();
        let ranking = Ranking::new(positive.clone(), &scores).unwrap();
        for _ in 0..200 {
            let draw = 1 + stream.below(n as u64) as usize;
            let idx: Vec<usize> = (0..draw).map(|_| stream.below(n as u64) as usize).collect();
            let counts = ranking.place(&idx);
            let (p, s): (Vec<bool>, Vec<f64>) = idx.iter().map(|&i| (positive[i], scores[i])).unzip();
            assert_eq!(ranking.roc_auc(&counts).map(f64::to_bits), roc_auc(&p, &s).map(f64::to_bits));
            assert_eq!(ranking.average_precision(&counts).map(f64::to_bits), average_precision(&p, &s).map(f64::to_bits));
        }
        // Distinct scores: every place is a group of its own (the walk without tie groups), and
        // small resamples leave most places empty.
        let distinct: Vec<f64> = (0..n).map(|_| stream.uniform()).collect();
        let ranking = Ranking::new(positive.clone(), &distinct).unwrap();
        assert_eq!(ranking.starts.len(), n + 1, "no ties");
        for draw in [1usize, 2, 3, 10, 50, n, 3 * n] {
            for _ in 0..20 {
                let idx: Vec<usize> = (0..draw).map(|_| stream.below(n as u64) as usize).collect();
                let counts = ranking.place(&idx);
                let (p, s): (Vec<bool>, Vec<f64>) = idx.iter().map(|&i| (positive[i], distinct[i])).unzip();
                assert_eq!(ranking.roc_auc(&counts).map(f64::to_bits), roc_auc(&p, &s).map(f64::to_bits), "{draw} rows");
                assert_eq!(
                    ranking.average_precision(&counts).map(f64::to_bits),
                    average_precision(&p, &s).map(f64::to_bits),
                    "{draw} rows"
                );
            }
        }
        // Multiclass: three classes' probabilities, macro one-vs-rest.
        let k = 3;
        let probs: Vec<f64> = (0..n)
            .flat_map(|_| {
                let a = stream.below(9) as f64 + 1.0;
                let b = stream.below(9) as f64 + 1.0;
                let c = stream.below(9) as f64 + 1.0;
                [a / (a + b + c), b / (a + b + c), c / (a + b + c)]
            })
            .collect();
        let classes: Vec<usize> = (0..n).map(|_| stream.below(3) as usize).collect();
        let rankings = ClassRankings::new(&classes, &probs, k).unwrap();
        for _ in 0..100 {
            let idx: Vec<usize> = (0..n).map(|_| stream.below(n as u64) as usize).collect();
            let counts = rankings.place(&idx);
            let y: Vec<usize> = idx.iter().map(|&i| classes[i]).collect();
            let pr: Vec<f64> = idx.iter().flat_map(|&i| probs[i * k..(i + 1) * k].to_vec()).collect();
            assert_eq!(rankings.roc_auc(&counts).map(f64::to_bits), macro_ovr_auc(&y, &pr, k).map(f64::to_bits));
            assert_eq!(rankings.average_precision(&counts), None);
        }
        // A resample of one class has no ROC AUC, and none without positives has no precision.
        let negative = labels.iter().position(|&y| y == 0).unwrap();
        let only_negatives = ranking.place(&[negative, negative, negative]);
        assert_eq!(ranking.roc_auc(&only_negatives), None);
        assert_eq!(ranking.average_precision(&only_negatives), None);
    }
}
