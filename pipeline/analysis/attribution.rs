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

/// The gradients of rows at every point of an earlier, coarser integration of them: rows x
/// (`steps` + 1) x inputs, in the order of the rows integrated now.
struct Known<'a> {
    gradients: &'a [f32],
    steps: usize,
}

/// One integration of some rows: (x - x') times the mean gradient per input by the trapezoid rule
/// on all points (`fine`) and on every other point (`coarse`), rows x inputs each in f64; and the
/// gradients at every point, rows x (steps + 1) x inputs, for a finer integration to reuse (empty
/// when none will).
struct Integrated {
    fine: Vec<f64>,
    coarse: Vec<f64>,
    gradients: Vec<f32>,
}

/// The trapezoid-rule integral for `rows` of `x` over `steps` + 1 evenly spaced points of the
/// path (`steps` even), and the same rule on every other point (`steps` / 2 intervals), whose
/// difference from the first estimates its error at no extra cost. With `known`, the points of
/// that coarser integration (every (steps / known.steps)-th point: the same point, so the same
/// gradient bits) are not computed again; the sums add the points in the same order either way.
fn integrate(
    model: &mut ScoringModel,
    explained: Explained,
    (x, reference, classes): (&Matrix, &[f32], &[usize]),
    rows: &[usize],
    steps: usize,
    (known, keep): (Option<&Known<'_>>, bool),
) -> Integrated {
    let d = x.cols;
    let points_per_row = steps + 1;
    let reused = known.map(|k| steps / k.steps.max(1));
    // The points whose gradients are computed here.
    let fresh: Vec<usize> = (0..points_per_row).filter(|&k| reused.is_none_or(|r| k % r != 0)).collect();
    let mut fine = vec![0.0; rows.len() * d];
    let mut coarse = vec![0.0; rows.len() * d];
    let mut all_gradients = if keep { vec![0.0f32; rows.len() * points_per_row * d] } else { Vec::new() };
    let per_call = (POINTS_PER_CALL / fresh.len().max(1)).max(1);
    for (chunk_index, chunk) in rows.chunks(per_call).enumerate() {
        let mut points = Matrix::zeros(chunk.len() * fresh.len(), d);
        for (i, &r) in chunk.iter().enumerate() {
            let row = x.row(r);
            for (j, &k) in fresh.iter().enumerate() {
                let alpha = (k as f64 / steps as f64) as f32;
                let dst = &mut points.data[(i * fresh.len() + j) * d..(i * fresh.len() + j + 1) * d];
                for ((p, &xv), &rv) in dst.iter_mut().zip(row).zip(reference) {
                    *p = rv + alpha * (xv - rv);
                }
            }
        }
        let (_, gradients) = model.input_gradients(&points, &|point, z, g| explained.seed(z, classes[chunk[point / fresh.len()]], g));
        for (i, &r) in chunk.iter().enumerate() {
            let row_index = chunk_index * per_call + i;
            let at = row_index * d;
            let (f, c) = (&mut fine[at..at + d], &mut coarse[at..at + d]);
            let mut next_fresh = 0;
            for k in 0..points_per_row {
                let g = match (known, reused) {
                    (Some(known), Some(r)) if k % r == 0 => {
                        let at = (row_index * (known.steps + 1) + k / r) * d;
                        &known.gradients[at..at + d]
                    }
                    _ => {
                        let at = (i * fresh.len() + next_fresh) * d;
                        next_fresh += 1;
                        &gradients[at..at + d]
                    }
                };
                if keep {
                    all_gradients[(row_index * points_per_row + k) * d..(row_index * points_per_row + k + 1) * d].copy_from_slice(g);
                }
                let end = k == 0 || k == steps;
                let weight_fine = if end { 0.5 } else { 1.0 };
                let weight_coarse = if end {
                    0.5
                } else if k % 2 == 0 {
                    1.0
                } else {
                    0.0
                };
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
    Integrated { fine, coarse, gradients: all_gradients }
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

/// Rows integrated together through every refinement, on one thread of the pool.
const ROWS_PER_JOB: usize = 64;

/// Integrated gradients of every row of `x` from `reference` for one model; `classes` gives the
/// explained class per row (multiclass; ignored otherwise). Runs of rows go to the current rayon
/// pool's threads, each thread on its own copy of the model: a row's attributions depend on that
/// row alone, so the bits are those of one thread.
pub(crate) fn integrated_gradients(
    model: &mut ScoringModel,
    explained: Explained,
    x: &Matrix,
    reference: &[f32],
    classes: &[usize],
    widths: &[usize],
    steps: usize,
) -> Result<Attributions> {
    use rayon::prelude::*;
    let d = x.cols;
    let k = model.head.outputs();
    let at_x = model.raw(x);
    let at_reference = model.raw(&Matrix { rows: 1, cols: d, data: reference.to_vec() });
    let difference: Vec<f64> =
        (0..x.rows).map(|r| explained.value(&at_x[r * k..(r + 1) * k], classes[r]) - explained.value(&at_reference, classes[r])).collect();
    let all: Vec<usize> = (0..x.rows).collect();
    let shared: &ScoringModel = model;
    let job = Job { explained, path: (x, reference, classes), widths, steps, difference: &difference };
    // Runs of rows go to the threads one at a time: a run whose rows need finer integrations
    // costs many times another.
    let copies = crate::threads::PerThread::new();
    let own = || shared.clone().on_this_thread();
    let parts: Vec<Attributions> =
        all.par_chunks(ROWS_PER_JOB).with_max_len(1).map(|rows| copies.with(own, |model| job.rows(model, rows))).collect::<Result<_>>()?;
    let mut whole =
        Attributions { per_input: Vec::with_capacity(x.rows * d), difference, gap: Vec::new(), estimate: Vec::new(), steps: Vec::new() };
    for part in parts {
        whole.per_input.extend(part.per_input);
        whole.gap.extend(part.gap);
        whole.estimate.extend(part.estimate);
        whole.steps.extend(part.steps);
    }
    Ok(whole)
}

/// What every run of rows of one integration shares.
struct Job<'a> {
    explained: Explained,
    path: (&'a Matrix, &'a [f32], &'a [usize]),
    widths: &'a [usize],
    steps: usize,
    /// f(x) - f(x') of every row of x.
    difference: &'a [f64],
}

impl Job<'_> {
    /// The attributions of `rows` (their `difference` left empty): integrated with the job's
    /// steps, then each row that misses the tolerance again with 4, 16 and 64 times as many,
    /// each finer integration reusing the gradients of the coarser one.
    fn rows(&self, model: &mut ScoringModel, rows: &[usize]) -> Result<Attributions> {
        let d = self.path.0.cols;
        let difference = |i: usize| self.difference[rows[i]];
        let gap_of = |row: &[f64], diff: f64| (row.iter().sum::<f64>() - diff).abs();
        let first = integrate(model, self.explained, self.path, rows, self.steps, (None, true));
        let mut per_input = first.fine;
        let mut gap: Vec<f64> = per_input.chunks_exact(d.max(1)).enumerate().map(|(i, row)| gap_of(row, difference(i))).collect();
        let mut estimate: Vec<f64> = per_input
            .chunks_exact(d.max(1))
            .zip(first.coarse.chunks_exact(d.max(1)))
            .map(|(f, c)| error_estimate(f, c, self.widths))
            .collect();
        let mut used = vec![self.steps; rows.len()];
        let tolerance = self.explained.tolerance();
        // The rows (positions in `rows`) of the last integration, its steps and gradients.
        let (mut last_rows, mut last_steps, mut last_gradients): (Vec<usize>, usize, Vec<f32>) =
            ((0..rows.len()).collect(), self.steps, first.gradients);
        for factor in REFINEMENTS {
            let missed: Vec<usize> =
                (0..rows.len()).filter(|&i| gap[i].max(estimate[i]) > row_tolerance(tolerance, difference(i))).collect();
            if missed.is_empty() {
                break;
            }
            // A row within the tolerance is not integrated again and stays within it, so every
            // row missed now was in the last integration.
            let per_row = (last_steps + 1) * d;
            let mut coarser = Vec::with_capacity(missed.len() * per_row);
            for &i in &missed {
                let j = last_rows
                    .binary_search(&i)
                    .map_err(|_| crate::error::Error::Internal(format!("row {} missed the tolerance without being integrated", rows[i])))?;
                coarser.extend_from_slice(&last_gradients[j * per_row..(j + 1) * per_row]);
            }
            let missed_rows: Vec<usize> = missed.iter().map(|&i| rows[i]).collect();
            let steps = self.steps * factor;
            let finest = factor == REFINEMENTS[REFINEMENTS.len() - 1];
            let known = Known { gradients: &coarser, steps: last_steps };
            let again = integrate(model, self.explained, self.path, &missed_rows, steps, (Some(&known), !finest));
            for (m, &i) in missed.iter().enumerate() {
                let row = &again.fine[m * d..(m + 1) * d];
                // Keep the finer integral; it is closer to the exact one whatever its gap.
                gap[i] = gap_of(row, difference(i));
                estimate[i] = error_estimate(row, &again.coarse[m * d..(m + 1) * d], self.widths);
                per_input[i * d..(i + 1) * d].copy_from_slice(row);
                used[i] = steps;
            }
            (last_rows, last_steps, last_gradients) = (missed, steps, again.gradients);
        }
        Ok(Attributions { per_input, difference: Vec::new(), gap, estimate, steps: used })
    }
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

#[cfg(test)]
mod tests {
    use super::*;

    fn model() -> ScoringModel {
        let spec = crate::manifest::ModelSpec { hidden: vec![16, 16], ..Default::default() };
        let head = Head { task: crate::manifest::Task::Binary, classes: 2, loss: crate::manifest::RegressionLoss::Mse, huber_delta: 1.0 };
        ScoringModel::for_tests(&spec, 5, head, 11)
    }

    /// `rows` rows of 5 inputs spread over [-3, 3], a value per row and input.
    fn rows(rows: usize) -> Matrix {
        let data = (0..rows * 5).map(|i| ((i * 37 % 101) as f32 / 101.0 - 0.5) * 6.0).collect();
        Matrix { rows, cols: 5, data }
    }

    fn bits(v: &[f64]) -> Vec<u64> {
        v.iter().map(|x| x.to_bits()).collect()
    }

    #[test]
    fn a_finer_integration_reusing_coarser_gradients_has_the_bits_of_one_from_scratch() {
        let (mut m, x) = (model(), rows(9));
        let (reference, classes) = (vec![0.25f32; 5], vec![0usize; 9]);
        let path = (&x, &reference[..], &classes[..]);
        let some: Vec<usize> = vec![1, 4, 5, 8];
        let coarse = integrate(&mut m, Explained::Logit, path, &some, 8, (None, true));
        assert_eq!(coarse.gradients.len(), some.len() * 9 * 5);
        let known = Known { gradients: &coarse.gradients, steps: 8 };
        let reused = integrate(&mut m, Explained::Logit, path, &some, 32, (Some(&known), true));
        let scratch = integrate(&mut m, Explained::Logit, path, &some, 32, (None, true));
        assert_eq!(bits(&reused.fine), bits(&scratch.fine));
        assert_eq!(bits(&reused.coarse), bits(&scratch.coarse));
        assert_eq!(reused.gradients, scratch.gradients);
        let unkept = integrate(&mut m, Explained::Logit, path, &some, 32, (Some(&known), false));
        assert!(unkept.gradients.is_empty());
        assert_eq!(bits(&unkept.fine), bits(&scratch.fine));
    }

    #[test]
    fn attributions_are_the_same_bits_on_any_pool_and_rows_are_refined() {
        // More rows than one job takes, so runs of rows go to different threads.
        let (mut m, x) = (model(), rows(3 * ROWS_PER_JOB + 5));
        let (reference, classes) = (vec![0.0f32; 5], vec![0usize; x.rows]);
        let of = |threads: usize, m: &mut ScoringModel| {
            let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().expect("a pool");
            pool.install(|| integrated_gradients(m, Explained::Logit, &x, &reference, &classes, &[2, 3], 2)).expect("attributions")
        };
        let one = of(1, &mut m);
        assert!(one.steps.iter().any(|&s| s > 2), "two steps leave some rows over the tolerance");
        assert!(one.steps.contains(&(2 * 64)), "and some go to the finest refinement");
        for threads in [2, 3] {
            let many = of(threads, &mut m);
            assert_eq!(bits(&many.per_input), bits(&one.per_input), "{threads} threads");
            assert_eq!((bits(&many.gap), bits(&many.estimate), &many.steps), (bits(&one.gap), bits(&one.estimate), &one.steps));
            assert_eq!(bits(&many.difference), bits(&one.difference));
        }
    }
}
