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
pub(crate) struct Sensitivity {
    /// Empty: no section (a folder before layout 6).
    pub(crate) summary: String,
    pub(crate) attributions: Vec<Row>,
    pub(crate) table_note: String,
    pub(crate) shifts: Vec<Row>,
}

pub(crate) fn sensitivity(st: &StoredResults) -> Sensitivity {
    let Some(s) = &st.sensitivity else {
        return Sensitivity { summary: String::new(), attributions: Vec::new(), table_note: String::new(), shifts: Vec::new() };
    };
    let a = &s.attributions;
    let threshold = match &s.references.threshold {
        Some(ThresholdReference::Available { threshold, rows, highest_score, .. }) => format!(
            " `predict --reasons --reference threshold` measures from the mean of the {rows} training rows scored at or just above the deployed threshold {} (up to {}; the comparison US Regulation B's official comment 9(b)(2)-5 describes).",
            sig(*threshold, 4),
            sig(*highest_score, 4)
        ),
        Some(ThresholdReference::Unavailable { reason }) => {
            format!(" There is no threshold reference: {} (band {THRESHOLD_BAND}).", md(reason))
        }
        None => String::new(),
    };
    let summary = format!(
        "Integrated gradients (Sundararajan, Taly & Yan 2017) split each test row's move in {} from the training median row (numeric inputs at their training medians, categories at their training shares) into one contribution per feature, computed on the network's own exact gradients by the midpoint rule with {} steps; a row whose contributions miss the completeness check (they must add up to the row's move) by more than {} or {}% of the move, whichever is larger, is integrated again with 4, 16 and 64 times the steps. Over the {} test rows the worst gap left is {} ({} rows integrated again, {} still over). The share column counts the rows that give the feature among their {} principal reasons: {}. Sizes are in {}. Contributions describe this model's arithmetic around one reference, not causes, and they change with the reference.{}",
        if a.explains == "prediction" { "the prediction" } else { "log-odds (before any calibration map)" },
        a.steps,
        sig(a.tolerance, 3),
        sig(100.0 * a.relative_tolerance, 3),
        st.selection.test.rows,
        sig(a.worst_gap, 4),
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
        "How the score moves when one input moves (SR 11-7 section V asks for this check): every test row's numeric feature shifted by +-1 and +-0.1 training standard deviations, or its category switched to each level; the score is {score}. Median change and the 90th percentile of the change's size over the rows moved."
    );
    let shifts = s
        .shifts
        .iter()
        .flat_map(|f| {
            f.effects.iter().map(move |x| Row::of([md(&f.feature), md(&x.shift), x.rows.to_string(), sig(x.median, 3), sig(x.p90_size, 3)]))
        })
        .collect();
    Sensitivity { summary, attributions, table_note, shifts }
}
