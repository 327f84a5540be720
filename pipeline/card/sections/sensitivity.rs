//! The card's section on what moves the output: integrated gradients of the test rows from the
//! training median row (how large each feature's contribution is and how often it is a principal
//! reason), the reference rows `predict --reasons` measures from, and the sensitivity table.

use serde::Serialize;

use crate::analysis::reference::{ThresholdReference, THRESHOLD_BAND};
use crate::card::cells::Row;
use crate::format::sig;
use crate::results::StoredResults;
use crate::text::markdown_safe as md;

#[derive(Serialize)]
pub(crate) struct CurveFigure {
    pub(crate) file: String,
    pub(crate) alt: String,
    /// What the curve shows, in words: its range and where it rests on few training rows.
    pub(crate) caption: String,
}

/// A caption for one curve: where the mean starts and ends, its lowest and highest point, and the
/// grid point backed by the fewest training rows.
fn caption(c: &crate::analysis::curves::Curve, what: &str) -> String {
    let at = |i: usize| if c.grid.is_empty() { c.levels.get(i).map(|l| md(l)).unwrap_or_default() } else { sig(c.grid[i], 4) };
    let Some(mean) = c.average.first().filter(|m| !m.is_empty()) else { return String::new() };
    let (low, high) =
        (0..mean.len()).fold((0, 0), |(lo, hi), i| (if mean[i] < mean[lo] { i } else { lo }, if mean[i] > mean[hi] { i } else { hi }));
    let fewest = (0..c.training_rows.len()).min_by_key(|&i| c.training_rows[i]).unwrap_or(0);
    let classes = if c.average.len() > 1 { format!(" (first class shown; {} classes drawn)", c.average.len()) } else { String::new() };
    format!(
        "as {} varies, the mean {what}{classes} runs from {} at {} to {} at {}; lowest {} at {}, highest {} at {}. The point backed by the fewest training rows is {} ({} rows){}",
        md(&c.feature),
        sig(mean[0], 3),
        at(0),
        sig(mean[mean.len() - 1], 3),
        at(mean.len() - 1),
        sig(mean[low], 3),
        at(low),
        sig(mean[high], 3),
        at(high),
        at(fewest),
        c.training_rows.get(fewest).copied().unwrap_or(0),
        if c.ice.is_empty() { String::new() } else { format!("; pale lines: {} single test rows", c.ice.len()) }
    )
}

#[derive(Serialize)]
pub(crate) struct Sensitivity {
    /// Empty: no section (a folder before layout 6).
    pub(crate) summary: String,
    pub(crate) attributions: Vec<Row>,
    pub(crate) table_note: String,
    pub(crate) shifts: Vec<Row>,
    /// Level swaps of categorical features.
    pub(crate) swaps: Vec<Row>,
    /// Partial dependence figures, each with its caption in the text.
    pub(crate) curves: Vec<CurveFigure>,
    pub(crate) curves_note: String,
}

pub(crate) fn sensitivity(st: &StoredResults, curve_figures: &crate::card::figures::Figures) -> Sensitivity {
    let Some(s) = &st.sensitivity else {
        return Sensitivity {
            summary: String::new(),
            attributions: Vec::new(),
            table_note: String::new(),
            shifts: Vec::new(),
            swaps: Vec::new(),
            curves: Vec::new(),
            curves_note: String::new(),
        };
    };
    let a = &s.attributions;
    let threshold = match &s.references.threshold {
        Some(ThresholdReference::Available { threshold, rows, highest_score, .. }) => format!(
            " `predict --reasons --reference threshold` measures from the mean of the {rows} training rows{} scored at or just above the deployed threshold {} (up to {}; the comparison US Regulation B's official comment 9(b)(2)-5 describes).",
            s.references.threshold_sampled_rows.map(|n| format!(", among a seeded sample of {n} of the training rows,")).unwrap_or_default(),
            sig(*threshold, 4),
            sig(*highest_score, 4)
        ),
        Some(ThresholdReference::Unavailable { reason }) => format!(
            " There is no threshold reference: {} (band {THRESHOLD_BAND}{}).",
            md(reason),
            s.references.threshold_sampled_rows.map(|n| format!("; among a seeded sample of {n} of the training rows")).unwrap_or_default()
        ),
        None => String::new(),
    };
    let summary = format!(
        "Integrated gradients (Sundararajan, Taly & Yan 2017) split each test row's move in {} from the training median row (numeric inputs at their training medians, categories at their training shares) into one contribution per feature, computed on the network's own exact gradients by the trapezoid rule over {} intervals. Two checks guard the integral on every row: completeness (the contributions must add up to the row's move) and an error estimate per feature (the same rule on every other point); a row where either exceeds {} or {}% of the move, whichever is larger, is integrated again with 4, 16 and 64 times the intervals. Over {} the worst completeness gap left is {} and the worst error estimate {} ({} rows integrated again, {} still over). For a ReLU network the gradient jumps along the path, and a feature's contribution can still be off by somewhat more than its estimate. The share column counts the rows that give the feature among their {} principal reasons: {}. Sizes are in {}. Contributions describe this model's arithmetic around one reference, not causes, and they change with the reference.{}",
        if a.explains == "prediction" { "the prediction" } else { "log-odds (before any calibration map)" },
        a.steps,
        sig(a.tolerance, 3),
        sig(100.0 * a.relative_tolerance, 3),
        rows_note(s.sampled_rows, st.selection.test.rows),
        sig(a.worst_gap, 4),
        sig(a.worst_estimate, 4),
        a.refined_rows,
        a.rows_over_tolerance,
        a.reasons,
        md(&a.toward),
        if a.explains == "prediction" { "target units" } else { "log-odds" },
        threshold
    );
    let attributions =
        a.features.iter().map(|f| Row::of([md(&f.feature), sig(f.mean_size, 3), format!("{}%", sig(100.0 * f.reason_share, 3))])).collect();
    let score = match (st.manifest.data.task, s.target_std) {
        (_, Some(sd)) => format!("the prediction, in target units (training standard deviation {})", sig(sd, 4)),
        (crate::manifest::Task::Binary, _) => "the deployed probability of the positive class".into(),
        _ => "the deployed probability of the class predicted before the change".into(),
    };
    let table_note = format!(
        "How the score moves when one input moves (SR 11-7 section V asks for this check): every test row's numeric feature shifted by +-1 and +-0.1 training standard deviations, or its category switched to each level; the score is {score}. Each cell: the median change, and in brackets the 90th percentile of the change's size, over the rows moved."
    );
    let cell = |x: &crate::analysis::shifts::Effect| format!("{} ({})", sig(x.median, 3), sig(x.p90_size, 3));
    let shifts = s
        .shifts
        .iter()
        .filter(|f| f.numeric)
        .map(|f| {
            let mut cells = vec![md(&f.feature)];
            cells.extend(f.effects.iter().map(cell));
            Row::of(cells)
        })
        .collect();
    let swaps = s
        .shifts
        .iter()
        .filter(|f| !f.numeric)
        .flat_map(|f| {
            f.effects.iter().map(move |x| {
                Row::of([md(&f.feature), md(x.shift.trim_start_matches("= ")), x.rows.to_string(), sig(x.median, 3), sig(x.p90_size, 3)])
            })
        })
        .collect();
    let what = match (st.manifest.data.task, s.target_std) {
        (_, Some(_)) => "prediction".to_string(),
        (crate::manifest::Task::Binary, _) => {
            format!("probability of {}", st.record.class_labels.get(1).map(|l| md(l)).unwrap_or_default())
        }
        _ => "class probability".to_string(),
    };
    let curves = curve_figures
        .iter()
        .zip(&s.curves)
        .map(|((file, alt, _), c)| CurveFigure { file: file.clone(), alt: md(alt), caption: caption(c, &what) })
        .collect();
    let curves_note = if s.curves.is_empty() {
        String::new()
    } else {
        format!(
            "Partial dependence (Friedman 2001) and ICE curves (Goldstein et al. 2015) of the {} most important features: each test row's feature set to every grid value in turn (numeric: training quantiles 0.05 to 0.95; categorical: each training level), the rest of the row kept; the bold line is the mean over the test rows, pale lines single test rows. Beside each point, the training rows it stands for: where they are few, the curve describes rows the model has rarely seen. Curves average over rows, so an effect that differs between rows can cancel in the mean (the pale lines show whether it does); a curve shows what the model does, not what would happen to a person whose feature changed.",
            s.curves.len()
        )
    };
    let (table_note, curves_note) = match s.sampled_rows {
        Some(n) => {
            let sampled = format!(
                " The rows are a seeded sample of {n} of the {} test rows (at most {} from results layout 8; `analysis/sample.rs`).",
                st.selection.test.rows,
                crate::analysis::sample::MAX_ROWS
            );
            (table_note + &sampled, if curves_note.is_empty() { curves_note } else { curves_note + &sampled })
        }
        None => (table_note, curves_note),
    };
    Sensitivity { summary, attributions, table_note, shifts, swaps, curves, curves_note }
}

/// "the N test rows", or "a seeded sample of n of the N test rows".
pub(crate) fn rows_note(sampled: Option<usize>, test_rows: usize) -> String {
    match sampled {
        Some(n) => format!("a seeded sample of {n} of the {test_rows} test rows"),
        None => format!("the {test_rows} test rows"),
    }
}
