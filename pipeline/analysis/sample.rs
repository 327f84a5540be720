//! The test rows the heavier analyses after training compute on: permutation importance (each
//! feature scored again per repeat), and the sensitivity table, integrated gradients and partial
//! dependence curves (each row scored along a path or a grid). On a large test split they cost
//! minutes per million rows, so from results layout 8 they take at most [`MAX_ROWS`] rows: all of
//! them up to that, else a sample of that many drawn without replacement from the experiment's
//! `analysis-rows` stream, in test-split order. A sample this size is common practice for these
//! methods (scikit-learn's `permutation_importance` offers `max_samples` for the same reason);
//! the intervals of the importance repeats then also carry the sample's noise.

use crate::data::prep::Matrix;
use crate::rng::{Purpose, Stream};

/// The most test rows the heavier analyses compute on (results layout 8 on).
pub(crate) const MAX_ROWS: usize = 10_000;

/// The first results layout whose analyses sample the test rows.
pub(crate) const SAMPLED_FROM: u32 = 8;

/// Positions in the test split (increasing) that the heavier analyses of a folder of layout
/// `layout_version` compute on, for a test split of `test_rows` rows and the experiment's `seed`.
pub(crate) fn positions(test_rows: usize, seed: u64, layout_version: u32) -> Vec<usize> {
    let mut order: Vec<usize> = (0..test_rows).collect();
    if test_rows <= MAX_ROWS || layout_version < SAMPLED_FROM {
        return order;
    }
    Stream::new(seed, Purpose::AnalysisRows).shuffle(&mut order);
    order.truncate(MAX_ROWS);
    order.sort_unstable();
    order
}

/// The table rows at `positions` of the test split `test`.
pub(crate) fn rows(test: &[usize], positions: &[usize]) -> Vec<usize> {
    positions.iter().map(|&p| test[p]).collect()
}

/// The rows at `positions` of the encoded test matrix `test_x`, in that order.
pub(crate) fn matrix_rows(test_x: &Matrix, positions: &[usize]) -> Matrix {
    let data = positions.iter().flat_map(|&p| test_x.row(p).iter().copied()).collect();
    Matrix { rows: positions.len(), cols: test_x.cols, data }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn small_splits_and_older_layouts_keep_every_row_and_large_ones_a_seeded_sample() {
        assert_eq!(positions(5, 1, 8), vec![0, 1, 2, 3, 4]);
        assert_eq!(positions(MAX_ROWS, 1, 8).len(), MAX_ROWS);
        assert_eq!(positions(MAX_ROWS + 5, 1, 7).len(), MAX_ROWS + 5, "layout 7 analysed every row");
        let a = positions(50_000, 3, 8);
        assert_eq!(a.len(), MAX_ROWS);
        assert!(a.windows(2).all(|w| w[0] < w[1]), "distinct, in test-split order");
        assert!(*a.last().unwrap() < 50_000);
        assert_eq!(a, positions(50_000, 3, 8), "seeded");
        assert_ne!(a, positions(50_000, 4, 8));
        // Spread over the split: each fifth of it holds about a fifth of the sample.
        for fifth in 0..5 {
            let inside = a.iter().filter(|&&p| p / 10_000 == fifth).count();
            assert!((1_700..=2_300).contains(&inside), "fifth {fifth}: {inside}");
        }
    }
}
