//! The sensitivity table (supervisory practice: Federal Reserve SR 11-7, 2011, section V, asks
//! how outputs move when inputs move): for each numeric feature, the change in the deployed score
//! when every test row's value moves by +-1 and by +-0.1 training standard deviations (the
//! encoded input moves by that much; a missing value's fill moves with it), and for each level of
//! a categorical feature, the change when the rows holding another level are switched to it.
//! Reported per shift: the median change and the 90th percentile of its size over the rows
//! moved. The score is the positive-class probability (binary), the probability of the class
//! predicted before the shift (multiclass), or the prediction in target units (regression).
//! Nothing here is random.

use serde::{Deserialize, Serialize};

use crate::data::prep::{InputEncoding, Matrix};
use crate::error::Result;
use crate::metrics::bootstrap::quantile_sorted;
use crate::selection::serving::Deployed;

/// A rule of our own (no published standard sets one): a shift of a tenth of a training standard
/// deviation, within measurement noise for most fields, moving one row in ten by this much or
/// more is flagged: 0.05 of probability, or 0.25 training standard deviations of the target.
pub(crate) const SHARP_PROBABILITY: f64 = 0.05;
pub(crate) const SHARP_TARGET_SDS: f64 = 0.25;

/// One shift's effect over the rows it moved.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Effect {
    /// What moved: `+1 sd`, `-0.1 sd`, or `= level`.
    pub shift: String,
    pub rows: usize,
    /// Median signed change of the score.
    pub median: f64,
    /// 90th percentile of the change's size.
    pub p90_size: f64,
}

/// A feature's effects, numeric (four shifts) or categorical (one per level).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct FeatureShifts {
    pub feature: String,
    pub numeric: bool,
    pub effects: Vec<Effect>,
}

/// The numeric shifts, in training standard deviations.
const SHIFTS: [f64; 4] = [1.0, -1.0, 0.1, -0.1];

/// The deployed score per row from the deployed outputs (`k` per row): see the module's doc.
pub(crate) fn scores(task: crate::manifest::Task, outputs: &[f64], k: usize, classes: &[usize]) -> Vec<f64> {
    match task {
        crate::manifest::Task::Binary => outputs.chunks_exact(k).map(|r| r[1]).collect(),
        crate::manifest::Task::Multiclass => outputs.chunks_exact(k).zip(classes).map(|(r, &c)| r[c]).collect(),
        crate::manifest::Task::Regression => outputs.to_vec(),
    }
}

fn effect(shift: String, before: &[f64], after: &[f64], rows: &[usize]) -> Effect {
    let mut change: Vec<f64> = rows.iter().map(|&r| after[r] - before[r]).collect();
    let mut size: Vec<f64> = change.iter().map(|c| c.abs()).collect();
    change.sort_by(f64::total_cmp);
    size.sort_by(f64::total_cmp);
    let q = |v: &[f64], p: f64| if v.is_empty() { 0.0 } else { quantile_sorted(v, p) };
    Effect { shift, rows: rows.len(), median: q(&change, 0.5), p90_size: q(&size, 0.9) }
}

/// The sensitivity table of `model` on `x` (test rows): `classes` the class explained per row
/// (multiclass).
pub(crate) fn table(
    model: &mut Deployed,
    task: crate::manifest::Task,
    inputs: &[InputEncoding],
    x: &Matrix,
    classes: &[usize],
) -> Result<Vec<FeatureShifts>> {
    let k = model.head().values_per_row();
    let unmoved = model.score(x)?;
    let before = scores(task, &unmoved, k, classes);
    let all: Vec<usize> = (0..x.rows).collect();
    let mut out = Vec::with_capacity(inputs.len());
    let mut first = 0;
    let mut moved = x.clone();
    for enc in inputs {
        let width = enc.width();
        let restore = |m: &mut Matrix| {
            for r in 0..x.rows {
                let at = r * x.cols + first;
                m.data[at..at + width].copy_from_slice(&x.data[at..at + width]);
            }
        };
        let mut effects = Vec::new();
        match enc {
            InputEncoding::Numeric { .. } => {
                for delta in SHIFTS {
                    for r in 0..x.rows {
                        moved.data[r * x.cols + first] = x.data[r * x.cols + first] + delta as f32;
                    }
                    let after = scores(task, &model.score(&moved)?, k, classes);
                    effects.push(effect(format!("{delta:+} sd"), &before, &after, &all));
                    restore(&mut moved);
                }
            }
            InputEncoding::Categorical { levels, .. } => {
                for (l, level) in levels.iter().enumerate() {
                    let rows: Vec<usize> = (0..x.rows).filter(|&r| x.data[r * x.cols + first + l] != 1.0).collect();
                    let mut changed = Vec::with_capacity(rows.len());
                    for r in 0..x.rows {
                        // The level's one-hot input on, every other input of the feature (the
                        // other levels, the unseen bucket, a missing flag) off.
                        let at = r * x.cols + first;
                        moved.data[at..at + width].iter_mut().enumerate().for_each(|(j, v)| *v = if j == l { 1.0 } else { 0.0 });
                        if crate::data::prep::bits_differ(&moved.data[at..at + width], &x.data[at..at + width]) {
                            changed.push(r);
                        }
                    }
                    // Rows already at the level keep their outputs and are not scored again.
                    let after = scores(task, &model.score_changed(&moved, &changed, &unmoved)?, k, classes);
                    effects.push(effect(format!("= {level}"), &before, &after, &rows));
                    restore(&mut moved);
                }
            }
        }
        out.push(FeatureShifts { feature: enc.name().to_string(), numeric: matches!(enc, InputEncoding::Numeric { .. }), effects });
        first += width;
    }
    Ok(out)
}
