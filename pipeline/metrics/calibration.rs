//! Calibration measured: the top-label reliability table and the expected calibration error
//! computed from it, so the one recomputes the other exactly, and one-against-the-rest tables per
//! class. Every table uses one binning: `bins` equal-width bins closed on the right,
//! ((m-1)/M, m/M], with 0 in the first (Guo et al. 2017, section 2; the "uniform" strategy of
//! scikit-learn's `calibration_curve`).

/// One bin of a reliability diagram.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ReliabilityBin {
    pub lower: f64,
    pub upper: f64,
    pub count: usize,
    pub mean_predicted: f64,
    pub observed: f64,
    /// 95% Wilson interval of `observed` (tables of results layout 5 on).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub observed_interval: Option<(f64, f64)>,
}

/// The top-label reliability table: per bin of top-label confidence (the largest class
/// probability), its rows, mean confidence and accuracy (the share whose top label is the true
/// class) with a 95% Wilson interval. Empty bins are left out. [`ece_from_table`] of it is the
/// expected calibration error.
pub fn top_label_table(labels: &[usize], probs: &[f64], k: usize, bins: usize) -> Vec<ReliabilityBin> {
    table(probs.chunks_exact(k).zip(labels).map(|(row, &y)| top_label_point(row, y)), bins, true)
}

/// One row's top-label point: its largest class probability, and whether that class is `y`.
pub fn top_label_point(row: &[f64], y: usize) -> (f64, bool) {
    let top = super::classification::argmax(row);
    (row[top], top == y)
}

/// Running sums of a reliability table: per bin, its rows, the sum of their predicted values
/// (added in the order the rows come) and their hits.
pub struct BinSums {
    count: Vec<usize>,
    predicted: Vec<f64>,
    hits: Vec<usize>,
}

impl BinSums {
    pub fn new(bins: usize) -> Self {
        BinSums { count: vec![0; bins], predicted: vec![0.0; bins], hits: vec![0; bins] }
    }

    /// Adds a row of predicted value `p` in bin `bin` ([`bin_of`]).
    pub fn add(&mut self, bin: usize, p: f64, hit: bool) {
        self.count[bin] += 1;
        self.predicted[bin] += p;
        self.hits[bin] += hit as usize;
    }

    /// Per non-empty bin, its rows, mean predicted value and share of hits, with the share's
    /// Wilson interval when asked.
    pub fn table(&self, with_interval: bool) -> Vec<ReliabilityBin> {
        let bins = self.count.len();
        (0..bins)
            .filter(|&b| self.count[b] > 0)
            .map(|b| ReliabilityBin {
                lower: b as f64 / bins as f64,
                upper: (b + 1) as f64 / bins as f64,
                count: self.count[b],
                mean_predicted: self.predicted[b] / self.count[b] as f64,
                observed: self.hits[b] as f64 / self.count[b] as f64,
                observed_interval: with_interval.then(|| super::wilson::interval(self.hits[b], self.count[b], super::wilson::Z95)),
            })
            .collect()
    }

    /// The expected calibration error of the table over `rows` rows: the bits of
    /// [`expected_calibration_error`] of the same rows in the same order.
    pub fn ece(&self, rows: usize) -> Option<f64> {
        (rows > 0 && !self.count.is_empty()).then(|| ece_from_table(&self.table(false), rows))
    }
}

/// One table from (predicted value, hit) points: per non-empty bin of the predicted value, its
/// rows, mean predicted value and share of hits, with the share's Wilson interval when asked.
fn table(points: impl Iterator<Item = (f64, bool)>, bins: usize, with_interval: bool) -> Vec<ReliabilityBin> {
    let mut sums = BinSums::new(bins);
    for (p, hit) in points {
        sums.add(bin_of(p, bins), p, hit);
    }
    sums.table(with_interval)
}

/// The expected calibration error of a reliability table over `rows` rows: each bin's
/// |observed - mean predicted| weighted by its share of rows, summed in bin order.
pub fn ece_from_table(table: &[ReliabilityBin], rows: usize) -> f64 {
    let n = rows as f64;
    table.iter().map(|b| (b.count as f64 / n) * (b.observed - b.mean_predicted).abs()).sum()
}

/// One class against the rest: the class's probability binned, with the share of rows of that
/// class per bin and its Wilson interval.
pub fn class_table(labels: &[usize], probs: &[f64], k: usize, class: usize, bins: usize) -> Vec<ReliabilityBin> {
    table(probs.chunks_exact(k).zip(labels).map(|(row, &y)| (row[class], y == class)), bins, true)
}

/// Index of the right-closed equal-width bin holding `x` in [0, 1]: the number of interior edges
/// `j / bins` (computed as `j * (1 / bins)`, as numpy's `linspace` does) strictly below `x`. So
/// an edge value belongs to the bin below it, 0 to the first bin and 1 to the last.
pub fn bin_of(x: f64, bins: usize) -> usize {
    let step = 1.0 / bins as f64;
    (1..bins).filter(|&j| (j as f64 * step) < x).count()
}

/// ECE with `bins` right-closed equal-width bins over top-label confidence (the largest class
/// probability), each bin's |accuracy - mean confidence| weighted by its share of rows
/// (Guo et al. 2017, "On Calibration of Modern Neural Networks", eq. 3 with bins
/// I_m = ((m-1)/M, m/M]): [`ece_from_table`] of [`top_label_table`].
pub fn expected_calibration_error(labels: &[usize], probs: &[f64], k: usize, bins: usize) -> Option<f64> {
    if labels.is_empty() || bins == 0 {
        return None;
    }
    Some(ece_from_table(&top_label_table(labels, probs, k, bins), labels.len()))
}

/// Observed positive share against mean predicted probability in `bins` right-closed equal-width
/// bins ([`bin_of`]) on the positive-class probability, as the "uniform" strategy of
/// scikit-learn's `calibration_curve` bins. Empty bins are left out. The binary table of results
/// layouts 3 and 4, kept so their folders re-derive bit for bit; no interval.
pub fn reliability_bins(is_positive: &[bool], p_positive: &[f64], bins: usize) -> Vec<ReliabilityBin> {
    table(p_positive.iter().copied().zip(is_positive.iter().copied()), bins, false)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn edges_belong_to_the_bin_below() {
        assert_eq!(bin_of(0.0, 10), 0);
        assert_eq!(bin_of(0.1, 10), 0);
        assert_eq!(bin_of(0.100001, 10), 1);
        assert_eq!(bin_of(0.9, 10), 8);
        assert_eq!(bin_of(1.0, 10), 9);
    }
}
