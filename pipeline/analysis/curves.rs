//! Partial dependence (Friedman 2001, "Greedy function approximation", Annals of Statistics
//! 29(5), section 8.2) and individual conditional expectation curves (Goldstein, Kapelner, Bleich
//! & Pitkin 2015, JCGS 24(1)) of the deployed score for the most important features: every test
//! row's feature set to each grid value in turn (numeric: the training quantiles 0.05, 0.10, ...,
//! 0.95 by linear interpolation, `numpy.quantile`'s default, equal values merged; categorical:
//! each training level), the rest of the row kept. The partial dependence is the mean over the
//! test rows; ICE curves are kept for the first rows of the test split. Beside each grid value,
//! the training rows it stands for (numeric: values nearer to it than to its neighbours; a level:
//! its rows), so a reviewer sees where a curve rests on few rows. Nothing here is random.

use serde::{Deserialize, Serialize};

use super::shifts::scores;
use crate::data::prep::{InputEncoding, Matrix};
use crate::error::Result;
use crate::manifest::Task;
use crate::metrics::order_statistics::linear_quantiles;
use crate::selection::serving::Deployed;

/// Test rows whose ICE curves are stored.
pub(crate) const ICE_ROWS: usize = 50;

/// The quantile levels of a numeric grid: 0.05, 0.10, ..., 0.95.
fn levels() -> Vec<f64> {
    (1..20).map(|i| i as f64 / 20.0).collect()
}

/// One feature's curves.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Curve {
    pub feature: String,
    /// Numeric grid values in the feature's own units (empty for a categorical feature).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub grid: Vec<f64>,
    /// The levels of a categorical feature (empty for a numeric one).
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub levels: Vec<String>,
    /// Training rows each grid point stands for.
    pub training_rows: Vec<usize>,
    /// The partial dependence per grid point: of the score (binary, regression) or of each
    /// class's probability (multiclass, one curve per class in label order).
    pub average: Vec<Vec<f64>>,
    /// Test-row positions (0-based within the test split) of the ICE curves; binary and
    /// regression only.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub ice_rows: Vec<usize>,
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub ice: Vec<Vec<f64>>,
}

/// The numeric grid of `train_values` (observed training values): the quantiles at [`levels`],
/// equal values merged, and the training rows nearest each.
pub(crate) fn numeric_grid(train_values: &[f64]) -> (Vec<f64>, Vec<usize>) {
    if train_values.is_empty() {
        return (Vec::new(), Vec::new());
    }
    let mut grid = linear_quantiles(train_values, &levels());
    grid.dedup();
    // Bin edges halfway between neighbouring grid values; a value on an edge goes to the upper bin.
    let edges: Vec<f64> = grid.windows(2).map(|w| (w[0] + w[1]) / 2.0).collect();
    let mut counts = vec![0usize; grid.len()];
    for v in train_values {
        counts[edges.partition_point(|e| e <= v)] += 1;
    }
    (grid, counts)
}

/// The curves of `features` (indices into `inputs`, most important first) for `model` on the
/// test rows `x`; `train` gives each feature's training values (numeric) or labels.
pub(crate) fn curves(
    model: &mut Deployed,
    task: Task,
    inputs: &[InputEncoding],
    x: &Matrix,
    features: &[usize],
    train: &dyn Fn(&str) -> Result<TrainingColumn>,
) -> Result<Vec<Curve>> {
    let k = model.head().values_per_row();
    let offsets: Vec<usize> = inputs.iter().scan(0, |at, e| Some(std::mem::replace(at, *at + e.width()))).collect();
    let ice_rows: Vec<usize> = if task == Task::Multiclass { Vec::new() } else { (0..x.rows.min(ICE_ROWS)).collect() };
    let mut out = Vec::with_capacity(features.len());
    let mut moved = x.clone();
    for &f in features {
        // One feature's training values at a time (8 bytes a training row, 64 MB at 8M rows),
        // beside the training matrix still held.
        let Grid { grid, levels, training_rows, points } = grid(&inputs[f], train)?;
        let enc = &inputs[f];
        let (first, width) = (offsets[f], enc.width());
        let curves_out = if task == Task::Multiclass { k } else { 1 };
        let mut average = vec![Vec::with_capacity(points.len()); curves_out];
        let mut ice = vec![Vec::with_capacity(points.len()); ice_rows.len()];
        for p in &points {
            for r in 0..x.rows {
                moved.data[r * x.cols + first..r * x.cols + first + width].copy_from_slice(p);
            }
            let outputs = model.score(&moved)?;
            let n = x.rows.max(1) as f64;
            if task == Task::Multiclass {
                for (c, curve) in average.iter_mut().enumerate() {
                    curve.push(outputs.chunks_exact(k).map(|row| row[c]).sum::<f64>() / n);
                }
            } else {
                let s = scores(task, &outputs, k, &[]);
                average[0].push(s.iter().sum::<f64>() / n);
                for (curve, &r) in ice.iter_mut().zip(&ice_rows) {
                    curve.push(s[r]);
                }
            }
        }
        for r in 0..x.rows {
            let at = r * x.cols + first;
            moved.data[at..at + width].copy_from_slice(&x.data[at..at + width]);
        }
        out.push(Curve { feature: enc.name().to_string(), grid, levels, training_rows, average, ice_rows: ice_rows.clone(), ice });
    }
    Ok(out)
}

/// A feature's grid: its values (numeric) or levels, the training rows each stands for, and each
/// grid point as the values of the feature's network inputs.
struct Grid {
    grid: Vec<f64>,
    levels: Vec<String>,
    training_rows: Vec<usize>,
    points: Vec<Vec<f32>>,
}

/// The grid of the feature encoded by `enc`, from its training values (`train`).
fn grid(enc: &InputEncoding, train: &dyn Fn(&str) -> Result<TrainingColumn>) -> Result<Grid> {
    let width = enc.width();
    Ok(match (enc, train(enc.name())?) {
        (InputEncoding::Numeric { mean, scale, .. }, TrainingColumn::Values(values)) => {
            let (grid, training_rows) = numeric_grid(&values);
            let points = grid
                .iter()
                .map(|&v| {
                    let mut p = vec![0.0f32; width];
                    p[0] = ((v - mean) / scale) as f32;
                    p
                })
                .collect();
            Grid { grid, levels: Vec::new(), training_rows, points }
        }
        (InputEncoding::Categorical { levels, .. }, TrainingColumn::Labels(labels)) => {
            let training_rows = levels.iter().map(|l| labels.iter().filter(|x| x.as_deref() == Some(l.as_str())).count()).collect();
            let points = (0..levels.len())
                .map(|l| {
                    let mut p = vec![0.0f32; width];
                    p[l] = 1.0;
                    p
                })
                .collect();
            Grid { grid: Vec::new(), levels: levels.clone(), training_rows, points }
        }
        _ => return Err(crate::error::Error::Internal(format!("feature {} read as the wrong kind", enc.name()))),
    })
}

/// A feature's training values: numbers (missing ones left out) or labels.
pub(crate) enum TrainingColumn {
    Values(Vec<f64>),
    Labels(Vec<Option<String>>),
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_numeric_grid_merges_tied_quantiles_and_counts_the_rows_nearest_each() {
        // Quantiles of 0..=99 at 0.05 steps: 4.95, 9.9, ... (numpy.quantile, method "linear").
        let values: Vec<f64> = (0..100).map(f64::from).collect();
        let (grid, counts) = numeric_grid(&values);
        assert_eq!(grid.len(), 19);
        assert!((grid[0] - 4.95).abs() < 1e-12 && (grid[18] - 94.05).abs() < 1e-12);
        assert_eq!(counts.iter().sum::<usize>(), 100);
        // Three zeros and a one: the quantiles up to 0.65 are all 0 (merged into one point), then
        // 0.1, 0.25, ..., 0.85 by linear interpolation; the three zeros are nearest 0.
        let (grid, counts) = numeric_grid(&[0.0, 0.0, 0.0, 1.0]);
        assert_eq!(grid.len(), 7);
        assert!(grid[0] == 0.0 && grid.windows(2).all(|w| w[0] < w[1]) && (grid[6] - 0.85).abs() < 1e-12, "{grid:?}");
        assert_eq!(counts[0], 3);
        assert_eq!(counts.iter().sum::<usize>(), 4);
    }
}
