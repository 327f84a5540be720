//! Limitation rules about groups at the deployed decision: adverse impact by the four-fifths
//! rule, true- or false-positive rate gaps beyond a stated size, and calibration that fails
//! within a group though it holds overall. Only groups with at least the stated minimum of test
//! rows are judged.

use super::finding::*;
use crate::analysis::fairness::{Estimate, GroupFigures, ADVERSE_IMPACT_RATIO, ECE, FPR_GAP, TPR_GAP};
use crate::card::evidence::Evidence;
use crate::format::sig;

/// Every judged group with its column and the reference group it is compared with.
fn judged(e: &Evidence) -> impl Iterator<Item = (&str, &str, &GroupFigures)> {
    e.fairness.iter().flat_map(|f| &f.columns).flat_map(|c| {
        let reference = c.reference.as_deref().unwrap_or("");
        c.groups.iter().filter(move |g| g.judged && g.level != reference).map(move |g| (c.column.as_str(), reference, g))
    })
}

fn interval(x: &Estimate) -> String {
    format!("{} [{}, {}]", sig(x.value, 3), sig(x.lower, 3), sig(x.upper, 3))
}

/// The four-fifths rule (29 CFR 1607.4(D)): a group's selection rate below 4/5 of the most
/// favoured group's, judged on the point estimate as the rule states it; the interval is shown,
/// with a note when it reaches 4/5. Judged only when the manifest declares the favourable
/// outcome (without it, "selected" has no direction).
pub(super) fn adverse_impact(e: &Evidence) -> Option<Limitation> {
    e.fairness.as_ref()?.favourable.as_ref()?;
    let hits: Vec<String> = judged(e)
        .filter_map(|(column, reference, g)| {
            let air = g.figures.get(ADVERSE_IMPACT_RATIO)?;
            (air.value < FOUR_FIFTHS).then(|| {
                format!(
                    "{} = {} against {}: ratio {}{}",
                    column,
                    g.level,
                    reference,
                    interval(air),
                    if air.upper >= FOUR_FIFTHS { " (its interval reaches 0.8: not shown beyond sampling noise)" } else { "" }
                )
            })
        })
        .collect();
    (!hits.is_empty()).then(|| {
        Limitation::new(
            "adverse_impact",
            "A group receives the favourable outcome markedly less often",
            format!("selection-rate ratio to the most favoured group below 4/5 for {}", hits.join("; ")),
            format!(
                "a ratio of at least {FOUR_FIFTHS} on the point estimate (the four-fifths rule of the US Uniform Guidelines, 29 CFR 1607.4(D), 1978, also used in fair-lending and insurance reviews)"
            ),
        )
    })
}

/// A true- or false-positive rate gap to the most favoured group larger than the stated size,
/// judged by its interval (equal opportunity and equalized odds, Hardt, Price & Srebro 2016).
pub(super) fn error_rate_gap(e: &Evidence) -> Option<Limitation> {
    let limit = e.fairness.as_ref()?.rate_gap;
    let hits: Vec<String> = judged(e)
        .flat_map(|(column, reference, g)| {
            [(TPR_GAP, "true-positive"), (FPR_GAP, "false-positive")].into_iter().filter_map(move |(name, what)| {
                let gap = g.figures.get(name)?;
                (gap.lower > limit || gap.upper < -limit)
                    .then(|| format!("{column} = {} against {reference}: {what} rate gap {}", g.level, interval(gap)))
            })
        })
        .collect();
    (!hits.is_empty()).then(|| {
        Limitation::new(
            "error_rate_gap",
            "Error rates differ between groups",
            hits.join("; "),
            format!(
                "a gap of at most {} in true- or false-positive rate, judged by the 95% interval within groups (common practice; equal opportunity and equalized odds, Hardt, Price & Srebro 2016)",
                sig(limit, 3)
            ),
        )
    })
}

/// Calibration that holds on the whole test split (ECE at most the limit) but fails within a
/// judged group beyond noise (the group's ECE interval entirely above the limit).
pub(super) fn group_calibration(e: &Evidence) -> Option<Limitation> {
    if e.test_ece? > ECE_LIMIT {
        return None;
    }
    let hits: Vec<String> = e
        .fairness
        .iter()
        .flat_map(|f| &f.columns)
        .flat_map(|c| c.groups.iter().filter(|g| g.judged).map(move |g| (c.column.as_str(), g)))
        .filter_map(|(column, g)| {
            let ece = g.figures.get(ECE)?;
            (ece.lower > ECE_LIMIT).then(|| format!("{column} = {}: ECE {}", g.level, interval(ece)))
        })
        .collect();
    (!hits.is_empty()).then(|| {
        Limitation::new(
            "group_calibration",
            "Probabilities are calibrated overall but not within a group",
            format!("test ECE {} overall, but {}", sig(e.test_ece.unwrap_or(0.0), 3), hits.join("; ")),
            format!("ECE at most {ECE_LIMIT} within every judged group, judged by the interval's lower bound (common practice)"),
        )
    })
}
