//! Bins of a column's values as monitoring compares populations by them: for a number, edges at
//! the deciles of the non-missing reference values, `numpy.quantile` with `method="linear"`
//! (Hyndman and Fan's type 7) computed as numpy computes it, tied edges merged, bins closed on the
//! right, then a missing bin; for a category, one bin per training level, then unseen, then
//! missing. The first pass bins every feature's training values here (`scan.rs`), so the
//! monitoring profile costs no second read of the data; `monitor` counts a batch with [`Binner`].

use std::collections::HashMap;

use serde::{Deserialize, Serialize};

use super::prep::InputEncoding;
use super::table::{Column, ColumnValues};
use crate::metrics::order_statistics::values_at_ranks;

/// The quantiles numeric edges are placed at.
pub(crate) const DECILES: [f64; 9] = [0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9];

/// How a column's values fall into bins.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub(crate) enum Bins {
    /// `edges.len() + 1` value bins closed on the right, then the missing bin.
    Numeric {
        edges: Vec<f64>,
        /// Smallest and largest non-missing value of the reference rows.
        min: f64,
        max: f64,
    },
    /// One bin per level, then the unseen bin, then the missing bin.
    Levels { levels: Vec<String> },
}

impl Bins {
    /// Every bin, value bins first, then (levels) unseen, then missing.
    pub(crate) fn len(&self) -> usize {
        match self {
            Bins::Numeric { edges, .. } => edges.len() + 2,
            Bins::Levels { levels } => levels.len() + 2,
        }
    }

    pub(crate) fn missing_bin(&self) -> usize {
        self.len() - 1
    }

    /// The unseen-level bin of a categorical column.
    pub(crate) fn unseen_bin(&self) -> Option<usize> {
        matches!(self, Bins::Levels { .. }).then(|| self.len() - 2)
    }

    /// The bin of a number (`None` or not finite: missing).
    pub(crate) fn of_number(&self, value: Option<f64>) -> usize {
        match (self, value) {
            (Bins::Numeric { edges, .. }, Some(v)) if v.is_finite() => edges.partition_point(|e| *e < v),
            _ => self.missing_bin(),
        }
    }

    /// A short label per bin, for tables and figures.
    pub(crate) fn labels(&self) -> Vec<String> {
        let mut out = Vec::with_capacity(self.len());
        match self {
            Bins::Numeric { edges, .. } => {
                let g = |x: f64| crate::format::sig(x, 4);
                if edges.is_empty() {
                    out.push("every value".into());
                } else {
                    out.push(format!("<= {}", g(edges[0])));
                    for w in edges.windows(2) {
                        out.push(format!("({}, {}]", g(w[0]), g(w[1])));
                    }
                    out.push(format!("> {}", g(edges[edges.len() - 1])));
                }
            }
            Bins::Levels { levels } => {
                out.extend(levels.iter().cloned());
                out.push("(unseen level)".into());
            }
        }
        out.push("(missing)".into());
        out
    }
}

/// One binned column and its reference counts.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct BinnedColumn {
    pub name: String,
    pub bins: Bins,
    /// Rows per bin, in [`Bins::len`] order.
    pub counts: Vec<u64>,
}

/// numpy's `quantile(sorted, q, method="linear")`, computed as numpy computes it: virtual index
/// `(n - 1) q`, and its `_lerp`, which interpolates from the upper neighbour when the fraction is
/// at least one half, so the edges equal numpy's to the last bit.
#[cfg(test)]
pub(crate) fn numpy_linear_quantile(sorted: &[f64], q: f64) -> f64 {
    let [lo, hi] = numpy_linear_ranks(sorted.len(), q);
    numpy_linear_between(sorted.len(), q, sorted[lo], sorted[hi])
}

/// The two sorted positions [`numpy_linear_quantile`] reads for `n` values.
fn numpy_linear_ranks(n: usize, q: f64) -> [usize; 2] {
    let lo = (((n - 1) as f64 * q).floor() as usize).min(n - 1);
    [lo, (lo + 1).min(n - 1)]
}

/// [`numpy_linear_quantile`] from the two values it reads ([`numpy_linear_ranks`]).
fn numpy_linear_between(n: usize, q: f64, a: f64, b: f64) -> f64 {
    let virtual_index = (n - 1) as f64 * q;
    let t = virtual_index - virtual_index.floor();
    let diff = b - a;
    if t >= 0.5 {
        b - diff * (1.0 - t)
    } else {
        a + diff * t
    }
}

/// Decile bins of the values (any order; none missing), the order statistics found by radix
/// selection (`metrics::order_statistics`): the edges a sort gives, bit for bit.
pub(crate) fn numeric_bins(values: &[f64]) -> Bins {
    let n = values.len();
    if n == 0 {
        return Bins::Numeric { edges: Vec::new(), min: f64::NAN, max: f64::NAN };
    }
    let mut ranks: Vec<usize> = DECILES.iter().flat_map(|&q| numpy_linear_ranks(n, q)).collect();
    ranks.extend([0, n - 1]);
    let at = values_at_ranks(values, &ranks);
    let mut edges: Vec<f64> =
        DECILES.iter().zip(at.chunks_exact(2)).map(|(&q, pair)| numpy_linear_between(n, q, pair[0], pair[1])).collect();
    edges.dedup();
    Bins::Numeric { edges, min: at[2 * DECILES.len()], max: at[2 * DECILES.len() + 1] }
}

/// Assigns the rows of a column (or of a chunk of one) to bins, looking text levels up once per
/// level rather than once per row.
pub(crate) struct Binner<'a> {
    bins: &'a Bins,
    levels: HashMap<&'a str, usize>,
}

impl<'a> Binner<'a> {
    pub(crate) fn new(bins: &'a Bins) -> Self {
        let levels = match bins {
            Bins::Levels { levels } => levels.iter().enumerate().map(|(i, l)| (l.as_str(), i)).collect(),
            Bins::Numeric { .. } => HashMap::new(),
        };
        Binner { bins, levels }
    }

    fn of_label(&self, label: Option<&str>) -> usize {
        match label {
            None => self.bins.missing_bin(),
            Some(l) => self.levels.get(l).copied().unwrap_or(self.bins.len() - 2),
        }
    }

    /// Adds every row of `col` to `counts`.
    pub(crate) fn tally(&self, col: &Column, counts: &mut [u64]) {
        match (self.bins, &col.values) {
            (Bins::Levels { .. }, ColumnValues::Text { codes, levels }) => {
                let by_code: Vec<usize> = levels.iter().map(|l| self.of_label(Some(l))).collect();
                for (r, &code) in codes.iter().enumerate() {
                    let bin = if col.is_valid(r) { by_code[code as usize] } else { self.bins.missing_bin() };
                    counts[bin] += 1;
                }
            }
            (Bins::Levels { .. }, _) => {
                for r in 0..col.len() {
                    counts[self.of_label(col.label(r).as_deref())] += 1;
                }
            }
            (Bins::Numeric { .. }, _) => {
                for r in 0..col.len() {
                    counts[self.bins.of_number(col.number(r))] += 1;
                }
            }
        }
    }
}

/// One feature's bins and counts over the training rows `train` of its column.
pub(crate) fn binned_training_column(enc: &InputEncoding, col: &Column, train: &[usize]) -> BinnedColumn {
    let bins = match enc {
        InputEncoding::Numeric { .. } => numeric_bins(&train.iter().filter_map(|&r| col.number(r)).collect::<Vec<_>>()),
        InputEncoding::Categorical { levels, .. } => Bins::Levels { levels: levels.clone() },
    };
    let mut counts = vec![0u64; bins.len()];
    let binner = Binner::new(&bins);
    for &r in train {
        let bin = match &bins {
            Bins::Numeric { .. } => bins.of_number(col.number(r)),
            Bins::Levels { .. } => binner.of_label(col.label(r).as_deref()),
        };
        counts[bin] += 1;
    }
    BinnedColumn { name: enc.name().to_string(), bins, counts }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn linear_quantiles_match_numpy_worked_values() {
        // numpy.quantile([1, 2, 3, 4], [0.1, 0.5, 0.9]) = [1.3, 2.5, 3.7] (from memory; the
        // CI check compares every stored edge with numpy itself).
        let v = [1.0, 2.0, 3.0, 4.0];
        assert!((numpy_linear_quantile(&v, 0.1) - 1.3).abs() < 1e-15);
        assert_eq!(numpy_linear_quantile(&v, 0.5), 2.5);
        assert!((numpy_linear_quantile(&v, 0.9) - 3.7).abs() < 1e-15);
        assert_eq!(numpy_linear_quantile(&[5.0], 0.3), 5.0);
    }

    #[test]
    fn tied_edges_merge_and_bins_close_on_the_right() {
        let bins = numeric_bins(&vec![1.0; 5].into_iter().chain([2.0, 3.0]).collect::<Vec<_>>());
        let Bins::Numeric { edges, .. } = &bins else { panic!() };
        assert!(edges.windows(2).all(|w| w[0] < w[1]), "{edges:?}");
        assert_eq!(edges[0], 1.0);
        assert_eq!(bins.of_number(Some(1.0)), 0, "a value on an edge falls in the bin it closes");
        assert_eq!(bins.of_number(Some(1.1)), 1, "edges 1, 1.2, 1.8, 2.4");
        assert_eq!(edges.len(), 4);
        assert_eq!(bins.of_number(None), bins.missing_bin());
        assert_eq!(bins.of_number(Some(f64::NAN)), bins.missing_bin());
        let levels = Bins::Levels { levels: vec!["a".into(), "b".into()] };
        let col = Column {
            name: "c".into(),
            source_type: "utf8".into(),
            values: ColumnValues::Text { codes: vec![0, 1, 2, 0], levels: vec!["b".into(), "a".into(), "zz".into()] },
            valid: Some(vec![true, true, true, false]),
        };
        let mut counts = vec![0; levels.len()];
        Binner::new(&levels).tally(&col, &mut counts);
        assert_eq!(counts, vec![1, 1, 1, 1], "a, b, unseen, missing");
    }
}
