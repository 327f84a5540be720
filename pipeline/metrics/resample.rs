//! A classified sample made ready for its bootstrap resamples: each row's log-loss and Brier
//! terms, top-label point and decided class computed once, and the sample ranked once, so that a
//! resample (its rows as indices into the sample, repeats allowed) is scored in linear time with
//! the bits of the whole-sample metrics on its rows. Sums run over the resample's rows in its
//! order, as the whole-sample functions run over theirs, so every addition is the same; counts are
//! integers; the rank metrics read the resample's rows counted into the places of the sample's
//! ranking (`ranked`).

use std::cell::OnceCell;
use std::sync::OnceLock;

use super::calibration::{bin_of, top_label_point, BinSums};
use super::classification as c;
use super::ranked::ClassRankings;

/// Bins of the expected calibration error, as the metric table computes it.
const ECE_BINS: usize = 10;

/// What one row contributes to every metric, packed so a resample reads one record per row.
#[derive(Clone, Copy)]
struct RowTerms {
    log_loss: f64,
    brier: f64,
    /// Top-label confidence, its ECE bin, and whether the top label is the true class.
    confidence: f64,
    bin: u8,
    hit: bool,
    label: u32,
    predicted: u32,
}

/// A sample of classified rows: labels, probabilities (`k` per row) and what each row
/// contributes to every metric.
pub struct ClassifiedSample<'a> {
    labels: &'a [usize],
    probs: &'a [f64],
    k: usize,
    terms: OnceLock<Vec<RowTerms>>,
    /// Ranked when a rank metric is first asked for; `None` for a sample too large to rank
    /// exactly, whose rank metrics then sort each resample.
    rankings: OnceLock<Option<ClassRankings>>,
}

impl<'a> ClassifiedSample<'a> {
    pub fn new(labels: &'a [usize], probs: &'a [f64], k: usize) -> Self {
        ClassifiedSample { labels, probs, k, terms: OnceLock::new(), rankings: OnceLock::new() }
    }

    /// Each row's terms, computed when a metric that adds them is first asked for (a rank metric
    /// alone never needs them).
    fn terms(&self) -> &[RowTerms] {
        self.terms.get_or_init(|| {
            self.probs
                .chunks_exact(self.k)
                .zip(self.labels)
                .map(|(r, &y)| {
                    let (confidence, hit) = top_label_point(r, y);
                    RowTerms {
                        log_loss: c::log_loss_term(r, y),
                        brier: c::brier_term(r, y),
                        confidence,
                        bin: bin_of(confidence, ECE_BINS) as u8,
                        hit,
                        label: y as u32,
                        predicted: c::argmax(r) as u32,
                    }
                })
                .collect()
        })
    }

    fn rankings(&self) -> Option<&ClassRankings> {
        self.rankings.get_or_init(|| ClassRankings::new(self.labels, self.probs, self.k)).as_ref()
    }

    /// The resample of rows `idx` (indices into the sample).
    pub fn resample<'s>(&'s self, idx: &'s [usize]) -> Resample<'s> {
        Resample { sample: self, idx, placed: OnceCell::new(), totals: OnceCell::new() }
    }
}

/// The sums one pass over a resample's rows gives, in the resample's order.
struct Totals {
    log_loss: f64,
    brier: f64,
    calibration: BinSums,
    /// `confusion[true][predicted]`.
    confusion: Vec<Vec<usize>>,
}

/// One resample of a [`ClassifiedSample`]; its sums and its counts in the ranking's places are
/// computed once, when a metric first needs them.
pub struct Resample<'s> {
    sample: &'s ClassifiedSample<'s>,
    idx: &'s [usize],
    placed: OnceCell<Vec<Vec<u32>>>,
    totals: OnceCell<Totals>,
}

impl Resample<'_> {
    pub fn classes(&self) -> usize {
        self.sample.k
    }

    fn totals(&self) -> &Totals {
        self.totals.get_or_init(|| {
            let k = self.sample.k;
            let mut t = Totals { log_loss: 0.0, brier: 0.0, calibration: BinSums::new(ECE_BINS), confusion: vec![vec![0; k]; k] };
            let terms = self.sample.terms();
            for &i in self.idx {
                let row = &terms[i];
                // As log_loss and brier add their rows' terms: the same operations in the same order.
                t.log_loss -= row.log_loss;
                t.brier += row.brier;
                t.calibration.add(usize::from(row.bin), row.confidence, row.hit);
                t.confusion[row.label as usize][row.predicted as usize] += 1;
            }
            t
        })
    }

    /// The resample counted into the places of `rankings`.
    fn placed(&self, rankings: &ClassRankings) -> &[Vec<u32>] {
        self.placed.get_or_init(|| rankings.place(self.idx))
    }

    fn rows(&self) -> Option<f64> {
        (!self.idx.is_empty()).then_some(self.idx.len() as f64)
    }

    pub fn accuracy(&self) -> Option<f64> {
        let m = &self.totals().confusion;
        self.rows().map(|n| (0..m.len()).map(|c| m[c][c]).sum::<usize>() as f64 / n)
    }

    pub fn balanced_accuracy(&self) -> Option<f64> {
        self.rows().and_then(|_| c::balanced_accuracy_of(&self.totals().confusion))
    }

    pub fn log_loss(&self) -> Option<f64> {
        self.rows().map(|n| self.totals().log_loss / n)
    }

    pub fn brier(&self) -> Option<f64> {
        self.rows().map(|n| self.totals().brier / n)
    }

    pub fn ece(&self) -> Option<f64> {
        self.totals().calibration.ece(self.idx.len())
    }

    /// Binary ROC AUC, or the macro one-vs-rest mean for more classes.
    pub fn roc_auc(&self) -> Option<f64> {
        match self.sample.rankings() {
            Some(r) => r.roc_auc(self.placed(r)),
            None => {
                let (labels, probs) = self.labels_and_probs();
                if self.sample.k == 2 {
                    let (positive, p): (Vec<bool>, Vec<f64>) =
                        labels.iter().map(|&y| y == 1).zip(probs.chunks_exact(2).map(|r| r[1])).unzip();
                    c::roc_auc(&positive, &p)
                } else {
                    c::macro_ovr_auc(&labels, &probs, self.sample.k)
                }
            }
        }
    }

    /// Binary average precision (`None` for more classes).
    pub fn average_precision(&self) -> Option<f64> {
        match self.sample.rankings() {
            Some(r) => r.average_precision(self.placed(r)),
            None if self.sample.k == 2 => {
                let (labels, probs) = self.labels_and_probs();
                let (positive, p): (Vec<bool>, Vec<f64>) = labels.iter().map(|&y| y == 1).zip(probs.chunks_exact(2).map(|r| r[1])).unzip();
                c::average_precision(&positive, &p)
            }
            None => None,
        }
    }

    /// The resample's labels and probabilities, row by row.
    fn labels_and_probs(&self) -> (Vec<usize>, Vec<f64>) {
        let k = self.sample.k;
        let labels = self.idx.iter().map(|&i| self.sample.labels[i]).collect();
        let probs = self.idx.iter().flat_map(|&i| self.sample.probs[i * k..(i + 1) * k].iter().copied()).collect();
        (labels, probs)
    }
}

/// Accuracy and balanced accuracy of the decisions `decided` (a class per sample row) on the
/// rows `idx`, from the confusion matrix of those rows: the bits of [`c::accuracy`] and
/// [`c::balanced_accuracy`] on them.
pub fn decision_metrics(labels: &[usize], decided: &[usize], k: usize, idx: &[usize]) -> (Option<f64>, Option<f64>) {
    if idx.is_empty() {
        return (None, None);
    }
    let mut m = vec![vec![0usize; k]; k];
    for &i in idx {
        m[labels[i]][decided[i]] += 1;
    }
    let hits: usize = (0..k).map(|c| m[c][c]).sum();
    (Some(hits as f64 / idx.len() as f64), c::balanced_accuracy_of(&m))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::metrics::registry::{classification_metrics, resample_metrics};
    use crate::rng::{Purpose, Stream};

    /// Probabilities on a coarse grid (ties, exact 0 and 1, which log loss clips), resampled with
    /// replacement: every metric of the table, from the prepared sample, has the bits of the
    /// whole-sample metric on the resample's rows.
    #[test]
    fn resampled_metrics_equal_the_whole_sample_metrics_bit_for_bit() {
        let mut stream = Stream::new(11, Purpose::Bootstrap);
        for k in [2usize, 3, 4] {
            let n = 300;
            let probs: Vec<f64> = (0..n)
                .flat_map(|_| {
                    let w: Vec<f64> = (0..k).map(|_| stream.below(6) as f64).collect();
                    let total: f64 = w.iter().sum::<f64>().max(1.0);
                    w.into_iter().map(|v| v / total).collect::<Vec<_>>()
                })
                .collect();
            let labels: Vec<usize> = (0..n).map(|_| stream.below(k as u64) as usize).collect();
            let sample = ClassifiedSample::new(&labels, &probs, k);
            for draw in [1usize, 2, 17, n, 2 * n] {
                let idx: Vec<usize> = (0..draw).map(|_| stream.below(n as u64) as usize).collect();
                let y: Vec<usize> = idx.iter().map(|&i| labels[i]).collect();
                let p: Vec<f64> = idx.iter().flat_map(|&i| probs[i * k..(i + 1) * k].to_vec()).collect();
                let whole = classification_metrics(&y, &p, k);
                let resampled = resample_metrics(&sample.resample(&idx));
                assert_eq!(whole.keys().collect::<Vec<_>>(), resampled.keys().collect::<Vec<_>>());
                for (name, v) in &whole {
                    assert_eq!(v.map(f64::to_bits), resampled[name].map(f64::to_bits), "k {k}, {draw} rows: {name}");
                }
            }
        }
    }

    #[test]
    fn decisions_on_a_resample_give_the_bits_of_their_rows() {
        let labels = [0usize, 1, 1, 0, 1, 1, 0];
        let decided = [0usize, 1, 0, 1, 1, 1, 0];
        let idx = [1usize, 1, 2, 6, 3, 0];
        let y: Vec<usize> = idx.iter().map(|&i| labels[i]).collect();
        let d: Vec<usize> = idx.iter().map(|&i| decided[i]).collect();
        let (a, b) = decision_metrics(&labels, &decided, 2, &idx);
        assert_eq!(a.map(f64::to_bits), c::accuracy(&y, &d).map(f64::to_bits));
        assert_eq!(b.map(f64::to_bits), c::balanced_accuracy(&y, &d, 2).map(f64::to_bits));
    }
}
