//! The reference rows principal reasons are measured from, in the network's encoded inputs,
//! computed from the training rows and stored so `predict` needs the results folder only:
//! - the training median row: each numeric value input at its training median (linear
//!   interpolation between the middle values), and every indicator input (a one-hot level, the
//!   unseen bucket, a missing-value flag) at its training share, so a categorical feature holds
//!   the training population's level shares, not an all-zero group;
//! - for a binary model, the threshold row (the US Regulation B practice of comparing an
//!   applicant with those at or just above the passing score, 12 CFR 1002 Supplement I, comment
//!   9(b)(2)-5): the mean of the `reference_rows` training rows with the lowest deployed score at
//!   or above the deployed threshold, provided all of them score below threshold + 0.05.

use serde::{Deserialize, Serialize};

use crate::data::prep::{InputEncoding, Matrix};
use crate::metrics::order_statistics::{column_values_at_ranks, linear_between, linear_ranks};

/// How far above the deployed threshold a training row may score and still count as "just above".
pub(crate) const THRESHOLD_BAND: f64 = 0.05;

/// The threshold reference, or why there is none.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "status", rename_all = "snake_case")]
pub(crate) enum ThresholdReference {
    Available {
        threshold: f64,
        /// The training rows averaged, and the highest deployed score among them.
        rows: usize,
        highest_score: f64,
        values: Vec<f32>,
    },
    Unavailable {
        reason: String,
    },
}

/// Both reference rows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct References {
    pub median: Vec<f32>,
    /// Binary models only.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold: Option<ThresholdReference>,
    /// How many training rows the threshold reference was chosen from, when a sample of them
    /// (results layout 9 on, `analysis/sample.rs`); the median row always uses every row.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold_sampled_rows: Option<usize>,
}

/// Whether each encoded input is an indicator (0 or 1): one-hot levels, the unseen bucket and
/// missing-value flags; numeric values are not.
pub(crate) fn indicator_inputs(inputs: &[InputEncoding]) -> Vec<bool> {
    inputs
        .iter()
        .flat_map(|e| match e {
            InputEncoding::Numeric { indicator, .. } => {
                let mut v = vec![false];
                if *indicator {
                    v.push(true);
                }
                v
            }
            InputEncoding::Categorical { .. } => vec![true; e.width()],
        })
        .collect()
}

/// The training median row of `train_x`.
pub(crate) fn median_row(train_x: &Matrix, indicators: &[bool]) -> Vec<f32> {
    let n = train_x.rows.max(1);
    let values: Vec<usize> = (0..train_x.cols).filter(|&j| !indicators[j]).collect();
    let medians: Vec<f32> = if train_x.rows == 0 {
        vec![0.0; values.len()]
    } else {
        // The median of each value input, as quantile_sorted(_, 0.5) of its sorted training values.
        let last = train_x.rows - 1;
        let found = column_values_at_ranks(&train_x.data, train_x.cols, &values, &linear_ranks(last, 0.5));
        found.iter().map(|pair| linear_between(last, 0.5, pair[0], pair[1]) as f32).collect()
    };
    let mut medians = medians.into_iter();
    (0..train_x.cols)
        .map(|j| {
            if indicators[j] {
                let sum: f64 = (0..train_x.rows).map(|r| f64::from(train_x.data[r * train_x.cols + j])).sum();
                (sum / n as f64) as f32
            } else {
                medians.next().unwrap_or(0.0)
            }
        })
        .collect()
}

/// The threshold row: `scores` are the deployed positive-class probabilities of `train_x`'s rows.
pub(crate) fn threshold_row(train_x: &Matrix, scores: &[f64], threshold: f64, wanted: usize) -> ThresholdReference {
    let mut above: Vec<usize> = (0..train_x.rows).filter(|&r| scores[r] >= threshold).collect();
    // Lowest score first; ties in row order.
    above.sort_unstable_by(|&a, &b| scores[a].total_cmp(&scores[b]).then(a.cmp(&b)));
    let chosen = &above[..wanted.min(above.len())];
    let highest = chosen.last().map(|&r| scores[r]);
    match highest {
        Some(h) if chosen.len() == wanted && h < threshold + THRESHOLD_BAND => {
            let mut values = vec![0.0f64; train_x.cols];
            for &r in chosen {
                for (v, &x) in values.iter_mut().zip(train_x.row(r)) {
                    *v += f64::from(x);
                }
            }
            ThresholdReference::Available {
                threshold,
                rows: wanted,
                highest_score: h,
                values: values.iter().map(|v| (v / wanted as f64) as f32).collect(),
            }
        }
        _ => {
            let near = above.iter().filter(|&&r| scores[r] < threshold + THRESHOLD_BAND).count();
            ThresholdReference::Unavailable {
                reason: format!(
                    "{near} training rows score in [{threshold:.4}, {:.4}), the band just above the deployed threshold; \
                     analysis.reference_rows asks for {wanted}",
                    threshold + THRESHOLD_BAND
                ),
            }
        }
    }
}
