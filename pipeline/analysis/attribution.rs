//! Integrated gradients (Sundararajan, Taly & Yan, "Axiomatic attribution for deep networks",
//! ICML 2017): each network input's share of the move of the model's explained output from a
//! reference row x' to the row x, (x_i - x'_i) times the mean gradient along the straight path
//! between them, here by the trapezoid rule over `steps` + 1 evenly spaced points with the
//! engine's exact evaluation-mode input gradients. The explained output is the log-odds, never a calibrated
//! probability: the logit of a binary head, log p_c - log(1 - p_c) of class c for a multiclass
//! one, and the prediction in target units for regression. Completeness (the attributions sum to
//! f(x) - f(x')) holds for the exact integral. Each feature's error is estimated by the same rule
//! on every other point (nested, so free). A row whose completeness gap or largest feature error
//! estimate exceeds the tolerance is integrated again with 4, 16 and then 64 times the steps, and
//! the gap and estimate left are reported per row. Nothing here is random.

use crate::data::prep::Matrix;
use crate::error::Result;
use crate::selection::scoring::ScoringModel;
use crate::training::Head;

/// Largest |sum of attributions - (f(x) - f(x'))| accepted before a row is integrated again with
/// more steps: 0.01 in log-odds (about a quarter of a percentage point of probability near 0.5),
/// or 0.01 training standard deviations of the target for regression.
pub(crate) const COMPLETENESS_TOLERANCE: f64 = 0.01;
/// ... or this share of the row's move |f(x) - f(x')|, whichever is larger: a ReLU network's
/// gradient jumps where a unit switches, and a long path over many switches needs a tolerance
/// that grows with it.
pub(crate) const RELATIVE_TOLERANCE: f64 = 0.001;

/// The completeness tolerance of a row whose explained output moves by `difference`; `base` is
/// [`COMPLETENESS_TOLERANCE`] in the explained output's units.
pub(crate) fn row_tolerance(base: f64, difference: f64) -> f64 {
    base.max(RELATIVE_TOLERANCE * difference.abs())
}

/// Refinements tried on a row that misses the tolerance: the steps times 4, 16, then 64.
const REFINEMENTS: [usize; 3] = [4, 16, 64];

/// Points integrated per engine call (rows x steps), bounding the memory of one call.
const POINTS_PER_CALL: usize = 8192;

/// What a row's attributions explain.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Explained {
    /// A binary head's one logit (log-odds of the positive class).
    Logit,
    /// log p_c - log(1 - p_c) of a multiclass head, c given per row.
    LogOdds,
    /// A regression head's prediction in target units: mean + std * output.
    Prediction { std: f64 },
}

impl Explained {
    pub(crate) fn of(head: &Head, target_std: Option<f64>) -> Self {
        match head.task {
            crate::manifest::Task::Binary => Explained::Logit,
            crate::manifest::Task::Multiclass => Explained::LogOdds,
            crate::manifest::Task::Regression => Explained::Prediction { std: target_std.unwrap_or(1.0) },
        }
    }

    /// [`COMPLETENESS_TOLERANCE`] in the explained output's units.
    pub(crate) fn tolerance(self) -> f64 {
        match self {
            Explained::Prediction { std } => COMPLETENESS_TOLERANCE * std,
            _ => COMPLETENESS_TOLERANCE,
        }
    }

    /// The explained value of one row's raw outputs (class `c` for multiclass); the prediction's
    /// mean is left out, as it cancels in every difference.
    fn value(self, z: &[f32], c: usize) -> f64 {
        match self {
            Explained::Logit => f64::from(z[0]),
            Explained::Prediction { std } => std * f64::from(z[0]),
            Explained::LogOdds => f64::from(z[c]) - log_sum_exp_without(z, c),
        }
    }

    /// d value / d z for one row's raw outputs, into `g`.
    fn seed(self, z: &[f32], c: usize, g: &mut [f32]) {
        match self {
            Explained::Logit => g[0] = 1.0,
            Explained::Prediction { std } => g[0] = std as f32,
            Explained::LogOdds => {
                let lse = log_sum_exp_without(z, c);
                for (j, (gj, &zj)) in g.iter_mut().zip(z).enumerate() {
                    *gj = if j == c { 1.0 } else { -(f64::from(zj) - lse).exp() as f32 };
                }
            }
        }
    }
}

/// log sum_{j != c} exp(z_j), in f64.
fn log_sum_exp_without(z: &[f32], c: usize) -> f64 {
    let others = z.iter().enumerate().filter(|&(j, _)| j != c).map(|(_, &v)| f64::from(v));
    let max = others.clone().fold(f64::NEG_INFINITY, f64::max);
    max + others.map(|v| (v - max).exp()).sum::<f64>().ln()
}

/// Integrated gradients of every row of `x` from `reference`.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Attributions {
    /// rows x inputs, in the explained output's units.
    pub per_input: Vec<f64>,
    /// f(x) - f(x') per row.
    pub difference: Vec<f64>,
    /// |sum of the row's attributions - difference| per row.
    pub gap: Vec<f64>,
    /// The largest |trapezoid on all points - trapezoid on every other point| over the row's
    /// features: the estimated error of its contributions.
    pub estimate: Vec<f64>,
    /// Steps the row was finally integrated with.
    pub steps: Vec<usize>,
}

impl Attributions {
    /// The attributions of each raw feature (`widths` consecutive inputs each) per row.
    pub(crate) fn per_feature(&self, widths: &[usize]) -> Vec<Vec<f64>> {
        let d: usize = widths.iter().sum();
        self.per_input
            .chunks_exact(d.max(1))
            .map(|row| {
                let mut first = 0;
                widths
                    .iter()
                    .map(|&w| {
                        let s = row[first..first + w].iter().sum();
                        first += w;
                        s
                    })
                    .collect()
            })
            .collect()
    }
}

/// The trapezoid-rule integral for `rows` of `x` over `steps` + 1 evenly spaced points of the
/// path (`steps` even): (x - x') times the mean gradient, per input, in f64; and the same rule on
/// every other point (`steps` / 2 intervals), whose difference from the first estimates its error
/// at no extra cost. Returns (fine, coarse), rows x inputs each.
fn integrate(
    model: &mut ScoringModel,
    explained: Explained,
    x: &Matrix,
    reference: &[f32],
    classes: &[usize],
    rows: &[usize],
    steps: usize,
) -> (Vec<f64>, Vec<f64>) {
    let d = x.cols;
    let points_per_row = steps + 1;
    let mut fine = vec![0.0; rows.len() * d];
    let mut coarse = vec![0.0; rows.len() * d];
    let per_call = (POINTS_PER_CALL / points_per_row).max(1);
    for (chunk_index, chunk) in rows.chunks(per_call).enumerate() {
        let mut points = Matrix::zeros(chunk.len() * points_per_row, d);
        for (i, &r) in chunk.iter().enumerate() {
            let row = x.row(r);
            for k in 0..points_per_row {
                let alpha = (k as f64 / steps as f64) as f32;
                let dst = &mut points.data[(i * points_per_row + k) * d..(i * points_per_row + k + 1) * d];
                for ((p, &xv), &rv) in dst.iter_mut().zip(row).zip(reference) {
                    *p = rv + alpha * (xv - rv);
                }
            }
        }
        let (_, gradients) = model.input_gradients(&points, &|point, z, g| explained.seed(z, classes[chunk[point / points_per_row]], g));
        for (i, &r) in chunk.iter().enumerate() {
            let at = (chunk_index * per_call + i) * d;
            let (f, c) = (&mut fine[at..at + d], &mut coarse[at..at + d]);
            for k in 0..points_per_row {
                let end = k == 0 || k == steps;
                let weight_fine = if end { 0.5 } else { 1.0 };
                let weight_coarse = if end {
                    0.5
                } else if k % 2 == 0 {
                    1.0
                } else {
                    0.0
                };
                let g = &gradients[(i * points_per_row + k) * d..(i * points_per_row + k + 1) * d];
                for ((a, b), &g) in f.iter_mut().zip(c.iter_mut()).zip(g) {
                    *a += weight_fine * f64::from(g);
                    *b += weight_coarse * f64::from(g);
                }
            }
            for (((a, b), &xv), &rv) in f.iter_mut().zip(c.iter_mut()).zip(x.row(r)).zip(reference) {
                let delta = f64::from(xv) - f64::from(rv);
                *a *= delta / steps as f64;
                *b *= 2.0 * delta / steps as f64;
            }
        }
    }
    (fine, coarse)
}

/// The largest |fine - coarse| over the features of one row (`widths` inputs each).
fn error_estimate(fine: &[f64], coarse: &[f64], widths: &[usize]) -> f64 {
    let mut first = 0;
    widths
        .iter()
        .map(|&w| {
            let e = (fine[first..first + w].iter().sum::<f64>() - coarse[first..first + w].iter().sum::<f64>()).abs();
            first += w;
            e
        })
        .fold(0.0, f64::max)
}

/// Integrated gradients of every row of `x` from `reference` for one model; `classes` gives the
/// explained class per row (multiclass; ignored otherwise).
pub(crate) fn integrated_gradients(
    model: &mut ScoringModel,
    explained: Explained,
    x: &Matrix,
    reference: &[f32],
    classes: &[usize],
    widths: &[usize],
    steps: usize,
) -> Result<Attributions> {
    let d = x.cols;
    let k = model.head.outputs();
    let at_x = model.raw(x);
    let at_reference = model.raw(&Matrix { rows: 1, cols: d, data: reference.to_vec() });
    let difference: Vec<f64> =
        (0..x.rows).map(|r| explained.value(&at_x[r * k..(r + 1) * k], classes[r]) - explained.value(&at_reference, classes[r])).collect();
    let all: Vec<usize> = (0..x.rows).collect();
    let (mut per_input, coarse) = integrate(model, explained, x, reference, classes, &all, steps);
    let gap_of = |row: &[f64], diff: f64| (row.iter().sum::<f64>() - diff).abs();
    let mut gap: Vec<f64> = per_input.chunks_exact(d.max(1)).zip(&difference).map(|(row, &diff)| gap_of(row, diff)).collect();
    let mut estimate: Vec<f64> =
        per_input.chunks_exact(d.max(1)).zip(coarse.chunks_exact(d.max(1))).map(|(f, c)| error_estimate(f, c, widths)).collect();
    let mut used = vec![steps; x.rows];
    let tolerance = explained.tolerance();
    for factor in REFINEMENTS {
        let missed: Vec<usize> = (0..x.rows).filter(|&r| gap[r].max(estimate[r]) > row_tolerance(tolerance, difference[r])).collect();
        if missed.is_empty() {
            break;
        }
        let (again, again_coarse) = integrate(model, explained, x, reference, classes, &missed, steps * factor);
        for (i, &r) in missed.iter().enumerate() {
            let row = &again[i * d..(i + 1) * d];
            // Keep the finer integral; it is closer to the exact one whatever its gap.
            gap[r] = gap_of(row, difference[r]);
            estimate[r] = error_estimate(row, &again_coarse[i * d..(i + 1) * d], widths);
            per_input[r * d..(r + 1) * d].copy_from_slice(row);
            used[r] = steps * factor;
        }
    }
    Ok(Attributions { per_input, difference, gap, estimate, steps: used })
}

/// The mean of several models' attributions (a seed ensemble: each member explains its own
/// log-odds from the same reference, and the mean explains the members' mean log-odds).
pub(crate) fn mean(parts: Vec<Attributions>) -> Attributions {
    let n = parts.len().max(1) as f64;
    let mut it = parts.into_iter();
    let Some(mut first) = it.next() else {
        return Attributions { per_input: Vec::new(), difference: Vec::new(), gap: Vec::new(), estimate: Vec::new(), steps: Vec::new() };
    };
    for p in it {
        for (a, b) in first.per_input.iter_mut().zip(&p.per_input) {
            *a += b;
        }
        for (a, b) in first.difference.iter_mut().zip(&p.difference) {
            *a += b;
        }
        // The members' errors may add up: the sum of their estimates bounds the mean's estimate n times.
        for (a, b) in first.estimate.iter_mut().zip(&p.estimate) {
            *a += b;
        }
        for (a, b) in first.steps.iter_mut().zip(&p.steps) {
            *a = (*a).max(*b);
        }
    }
    first.per_input.iter_mut().for_each(|a| *a /= n);
    first.estimate.iter_mut().for_each(|a| *a /= n);
    first.difference.iter_mut().for_each(|a| *a /= n);
    let d = first.per_input.len() / first.difference.len().max(1);
    first.gap =
        first.per_input.chunks_exact(d.max(1)).zip(&first.difference).map(|(row, &diff)| (row.iter().sum::<f64>() - diff).abs()).collect();
    first
}

/// Integrated gradients of every row of `x` from `reference` for the deployed model, on the
/// explained output (the log-odds, never through a calibration map); a seed ensemble's are the
/// mean of its members'.
pub(crate) fn deployed(
    model: &mut crate::selection::serving::Deployed,
    x: &Matrix,
    reference: &[f32],
    classes: &[usize],
    widths: &[usize],
    steps: usize,
) -> Result<Attributions> {
    let explained = Explained::of(&model.head(), model.target_std());
    of_networks(model.networks(), explained, x, reference, classes, widths, steps)
}

/// Integrated gradients of every row of `x` from `reference` for one network or the members of a
/// seed ensemble (the mean of theirs).
pub(crate) fn of_networks<'a>(
    networks: impl Iterator<Item = &'a mut ScoringModel>,
    explained: Explained,
    x: &Matrix,
    reference: &[f32],
    classes: &[usize],
    widths: &[usize],
    steps: usize,
) -> Result<Attributions> {
    let mut parts =
        networks.map(|m| integrated_gradients(m, explained, x, reference, classes, widths, steps)).collect::<Result<Vec<_>>>()?;
    Ok(if parts.len() == 1 { parts.remove(0) } else { mean(parts) })
}
