//! Limitation rules about what drives the model: a feature the manifest lists as not to be used
//! for decisions that the model is shown to lean on, and a response so steep that a tenth of a
//! standard deviation moves scores far.

use super::finding::*;
use crate::analysis::shifts::{SHARP_PROBABILITY, SHARP_TARGET_SDS};
use crate::card::evidence::Evidence;
use crate::format::sig;

/// A feature listed in `[analysis] sensitive` whose permutation importance interval lies above 0.
pub(super) fn leans_on_sensitive_feature(e: &Evidence) -> Option<Limitation> {
    let importance = e.importance.as_ref()?;
    let hits: Vec<String> = importance
        .features
        .iter()
        .filter(|f| f.shown_to_matter && e.sensitive.contains(&f.feature))
        .map(|f| {
            let share = e
                .sensitivity
                .as_ref()
                .and_then(|s| s.attributions.features.iter().find(|a| a.feature == f.feature))
                .map(|a| format!("; a principal reason for {}% of test rows", sig(100.0 * a.reason_share, 3)))
                .unwrap_or_default();
            format!(
                "{}: permutation loss {} [{}, {}] in {}{share}",
                f.feature,
                sig(f.loss.value, 3),
                sig(f.loss.lower, 3),
                sig(f.loss.upper, 3),
                importance.metric
            )
        })
        .collect();
    (!hits.is_empty()).then(|| {
        Limitation::new(
            "leans_on_sensitive_feature",
            "The model leans on a feature listed as not to be used for decisions",
            hits.join("; "),
            "no feature of `[analysis] sensitive` shown to matter (its permutation-importance 95% interval above 0); a reviewer's list, judged by the importance interval".into(),
        )
    })
}

/// A numeric feature whose +-0.1 training-sd shift moves the 90th percentile of rows by at least
/// the stated amount (our own threshold; see `analysis::shifts`).
pub(super) fn sharp_sensitivity(e: &Evidence) -> Option<Limitation> {
    let s = e.sensitivity.as_ref()?;
    let (limit, unit) = match s.target_std {
        Some(sd) => (
            SHARP_TARGET_SDS * sd,
            format!("{} target units ({SHARP_TARGET_SDS} training standard deviations)", sig(SHARP_TARGET_SDS * sd, 3)),
        ),
        None => (SHARP_PROBABILITY, format!("{SHARP_PROBABILITY} of probability")),
    };
    let hits: Vec<String> = s
        .shifts
        .iter()
        .filter(|f| f.numeric)
        .filter_map(|f| {
            let worst = f.effects.iter().filter(|x| x.shift.contains("0.1")).max_by(|a, b| a.p90_size.total_cmp(&b.p90_size))?;
            (worst.p90_size >= limit)
                .then(|| format!("{} ({} moves one row in ten by {} or more)", f.feature, worst.shift, sig(worst.p90_size, 3)))
        })
        .collect();
    (!hits.is_empty()).then(|| {
        Limitation::new(
            "sharp_sensitivity",
            "A small change of one input moves scores far",
            hits.join("; "),
            format!(
                "a shift of 0.1 training standard deviations moving the 90th percentile of test rows by less than {unit}; a threshold of our own, not a published standard (supervisory guidance, SR 11-7 section V, asks for the check, not the number)"
            ),
        )
    })
}
