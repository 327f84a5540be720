//! The card's lead line on the decision: the deployed threshold and how it was set, and which
//! outcome the manifest declares favourable to the person; and the title of the results'
//! confusion matrix at that threshold.

use crate::format::sig;
use crate::manifest::{Task, ThresholdRule};
use crate::results::StoredResults;
use crate::selection::{ThresholdReport, DECLARED_DECISION_FROM};
use crate::text::code_span;

/// How a threshold rule set the threshold, in a sentence's middle; `calibrated` names the map
/// the probabilities went through, if any.
fn rule_phrase(report: &ThresholdReport, calibrated: Option<&str>) -> String {
    match report.rule {
        ThresholdRule::Fixed => "a fixed threshold stated in the manifest".into(),
        ThresholdRule::ExpectedCost => format!(
            "the expected-cost threshold c_FP / (c_FP + c_FN) with a false positive costing {} and a false negative {} \
             (Elkan 2001, \"The foundations of cost-sensitive learning\"); it assumes calibrated probabilities, and these {}",
            report.cost_false_positive.map_or("?".into(), |c| sig(c, 4)),
            report.cost_false_negative.map_or("?".into(), |c| sig(c, 4)),
            match calibrated {
                Some(method) => format!("are recalibrated by {method} (see Calibration)"),
                None => "are the network's own, not recalibrated".into(),
            }
        ),
        ThresholdRule::YoudenJOnValidation => {
            "set on the validation rows by Youden's J, the largest true-positive rate minus false-positive rate (Youden 1950)".into()
        }
    }
}

/// The "Decision" line of the card's summary; empty for regression.
pub(crate) fn lead(st: &StoredResults) -> String {
    let labels = &st.record.class_labels;
    match st.manifest.data.task {
        Task::Regression => String::new(),
        Task::Multiclass => "the most probable class (no threshold).".into(),
        Task::Binary => {
            let positive = labels.get(1).map(|l| code_span(l)).unwrap_or_default();
            let deployed = st.selection.deployed_threshold(st.layout_version);
            let threshold = match &deployed.report {
                Some(report) => format!(
                    "a row is predicted {positive} when its probability of {positive} is at least **{}**, the deployed threshold: {}.",
                    sig(deployed.value, 4),
                    rule_phrase(report, st.selection.calibration.as_ref().map(|c| c.map.method().as_str()))
                ),
                None if st.layout_version < DECLARED_DECISION_FROM => format!(
                    "a row is predicted {positive} when its probability of {positive} is above **0.5**: this folder was trained \
                     before tabcard 0.6 recorded a declared decision, so `predict` decides at 0.5, and any other threshold below is \
                     reported, not deployed."
                ),
                None => format!(
                    "a row is predicted {positive} when its probability of {positive} is at least **0.5**: the declared rule could \
                     not be applied (the validation rows lack a class)."
                ),
            };
            let favourable = st.manifest.decision.as_ref().and_then(|d| d.favourable.as_ref());
            let favourable = match favourable {
                Some(f) if labels.get(1) == Some(f) => {
                    format!(" The outcome favourable to the person is {}: rows at or above the threshold receive it.", code_span(f))
                }
                Some(f) => format!(" The outcome favourable to the person is {}: rows below the threshold receive it.", code_span(f)),
                None if st.layout_version >= DECLARED_DECISION_FROM => {
                    " Which outcome favours the person is not declared (`favourable` in the manifest's `[decision]`).".into()
                }
                None => String::new(),
            };
            let both_on_validation = match (&st.selection.calibration, &deployed.report) {
                (Some(c), Some(r)) if r.rule == ThresholdRule::YoudenJOnValidation => format!(
                    " The threshold and the {} calibration map were both fitted on the same validation rows that chose the model.",
                    c.map.method().as_str()
                ),
                _ => String::new(),
            };
            threshold + &favourable + &both_on_validation
        }
    }
}

/// The title of the confusion matrix at a reported threshold.
pub(crate) fn threshold_title(report: &ThresholdReport, layout_version: u32, calibrated: Option<&str>) -> String {
    let role = if layout_version >= DECLARED_DECISION_FROM { "the deployed threshold" } else { "threshold" };
    format!(
        "At {role} {}, {}: positive when the probability is at least {}; on validation, true-positive rate {} and false-positive rate {}",
        sig(report.threshold, 4),
        rule_phrase(report, calibrated),
        sig(report.threshold, 4),
        crate::format::fixed(report.validation_tpr, 4),
        crate::format::fixed(report.validation_fpr, 4)
    )
}
