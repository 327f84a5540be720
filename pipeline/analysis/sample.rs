//! The test rows the heavier analyses after training compute on: permutation importance (each
//! feature scored again per repeat), and the sensitivity table, integrated gradients and partial
//! dependence curves (each row scored along a path or a grid). On a large test split they cost
//! minutes per million rows, so from results layout 8 they take at most [`MAX_ROWS`] rows: all of
//! them up to that, else a sample of that many drawn without replacement from the experiment's
//! `analysis-rows` stream, in test-split order. A sample this size is common practice for these
//! methods (scikit-learn's `permutation_importance` offers `max_samples` for the same reason);
//! the intervals of the importance repeats then also carry the sample's noise.

use crate::rng::{Purpose, Stream};

/// The most test rows the heavier analyses compute on (results layout 8 on).
pub(crate) const MAX_ROWS: usize = 10_000;

/// The first results layout whose analyses sample the test rows.
pub(crate) const SAMPLED_FROM: u32 = 8;

/// Positions in the test split (increasing) that the heavier analyses of a folder of layout
/// `layout_version` compute on, for a test split of `test_rows` rows and the experiment's `seed`.
pub(crate) fn positions(test_rows: usize, seed: u64, layout_version: u32) -> Vec<usize> {
    if layout_version < SAMPLED_FROM {
        return (0..test_rows).collect();
    }
    drawn(test_rows, MAX_ROWS, Stream::new(seed, Purpose::AnalysisRows))
}

/// The most training rows the threshold reference row is chosen from (results layout 9 on): the
/// reference averages the few rows scored just above the deployed threshold, and scoring every
/// training row of a large table for it cost seconds per million rows.
pub(crate) const MAX_REFERENCE_ROWS: usize = 100_000;

/// The first results layout whose threshold reference is chosen from a sample of training rows.
pub(crate) const REFERENCE_SAMPLED_FROM: u32 = 9;

/// Positions in the training split (increasing) the threshold reference of a folder of layout
/// `layout_version` is chosen from: `None` for every row (up to [`MAX_REFERENCE_ROWS`], or an
/// older layout), else a sample of that many drawn without replacement from the experiment's
/// `reference-rows` stream.
pub(crate) fn reference_positions(training_rows: usize, seed: u64, layout_version: u32) -> Option<Vec<usize>> {
    (training_rows > MAX_REFERENCE_ROWS && layout_version >= REFERENCE_SAMPLED_FROM)
        .then(|| drawn(training_rows, MAX_REFERENCE_ROWS, Stream::new(seed, Purpose::ReferenceRows)))
}

/// `0..len` when it holds at most `at_most`, else `at_most` of them drawn without replacement
/// from `stream`, increasing.
fn drawn(len: usize, at_most: usize, mut stream: Stream) -> Vec<usize> {
    let mut order: Vec<usize> = (0..len).collect();
    if len <= at_most {
        return order;
    }
    stream.shuffle(&mut order);
    order.truncate(at_most);
    order.sort_unstable();
    order
}

/// The table rows at `positions` of the test split `test`.
pub(crate) fn rows(test: &[usize], positions: &[usize]) -> Vec<usize> {
    positions.iter().map(|&p| test[p]).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_threshold_reference_samples_large_training_splits_from_layout_9() {
        assert_eq!(reference_positions(MAX_REFERENCE_ROWS, 1, 9), None);
        assert_eq!(reference_positions(MAX_REFERENCE_ROWS + 1, 1, 8), None, "layout 8 chose among every row");
        let a = reference_positions(250_000, 5, 9).unwrap();
        assert_eq!(a.len(), MAX_REFERENCE_ROWS);
        assert!(a.windows(2).all(|w| w[0] < w[1]) && *a.last().unwrap() < 250_000);
        assert_eq!(Some(&a), reference_positions(250_000, 5, 9).as_ref(), "seeded");
        // Its own stream: not the test rows' sample of the same length and seed.
        assert_ne!(a[..MAX_ROWS], positions(250_000, 5, 9)[..]);
    }

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
