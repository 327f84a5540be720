//! Limitation rules about the data and the split: missing values, rare levels, a small minority
//! class, features constant on the training rows, rows and keys that cross splits.

use super::finding::*;
use crate::card::evidence::{ClassShare, Evidence};
use crate::format::sig;

pub(super) fn many_missing_values(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> =
        e.missing.iter().filter(|(_, s)| *s > MISSING_SHARE).map(|(n, s)| format!("{n} {}%", sig(100.0 * s, 3))).collect();
    (!flagged.is_empty()).then(|| {
        Limitation::new(
            "many_missing_values",
            "Features with many missing values",
            format!("missing shares: {}; the model sees the training median plus a missing flag for them", flagged.join(", ")),
            format!("at most {}% missing per feature (common practice)", 100.0 * MISSING_SHARE),
        )
    })
}

pub(super) fn rare_levels(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> = e.rare_levels.iter().filter(|(_, n)| *n > 0).map(|(c, n)| format!("{c} ({n})")).collect();
    let rows = crate::data::summary::RARE_LEVEL_ROWS;
    (!flagged.is_empty()).then(|| {
        Limitation::new(
            "rare_levels",
            "Category levels seen only rarely",
            format!(
                "features with levels seen in fewer than {rows} rows: {}; effects of those levels are poorly estimated",
                flagged.join(", ")
            ),
            format!("every level seen in at least {rows} rows (common practice)"),
        )
    })
}

/// The share below which a class of a `k`-class target is flagged: 10%, or half its fair share
/// 1/k when that is lower.
pub(crate) fn minority_limit(k: usize) -> f64 {
    MINORITY_SHARE.min(MINORITY_FAIR_SHARE_FACTOR / k.max(1) as f64)
}

pub(super) fn small_minority_class(e: &Evidence) -> Option<Limitation> {
    let limit = minority_limit(e.classes.len());
    let mut small: Vec<&ClassShare> = e.classes.iter().filter(|c| c.share < limit).collect();
    small.sort_by(|a, b| a.share.total_cmp(&b.share));
    let (one, many) = (small.len() == 1, small.len() > 1);
    (!small.is_empty()).then(|| {
        let named: Vec<String> = small
            .iter()
            .map(|c| format!("class \"{}\" has {} rows ({}% of the table)", c.label, c.rows, sig(100.0 * c.share, 3)))
            .collect();
        Limitation::new(
            "small_minority_class",
            if many { "Small minority classes" } else { "Small minority class" },
            format!("{}; accuracy at the default threshold says little for {}", named.join(", "), if one { "it" } else { "them" }),
            format!(
                "every class at least {}% of the rows: the lower of 10% and half the fair share 1/{} (common practice)",
                sig(100.0 * limit, 3),
                e.classes.len()
            ),
        )
    })
}

pub(super) fn constant_on_training_rows(e: &Evidence) -> Option<Limitation> {
    let (varying, constant) = (&e.constant_on_training, &e.constant_everywhere);
    (!varying.is_empty() || !constant.is_empty()).then(|| {
        let mut parts = Vec::new();
        if !varying.is_empty() {
            parts.push(format!(
                "{} take one value on every training row, so the model cannot learn from them, yet they vary in validation or test",
                varying.join(", ")
            ));
        }
        if !constant.is_empty() {
            parts.push(format!("{} take one value on every row of the table and carry no information (drop them)", constant.join(", ")));
        }
        Limitation::new(
            "constant_on_training_rows",
            "Features constant on the training rows",
            parts.join("; "),
            "every feature varies on the training rows".into(),
        )
    })
}

pub(super) fn duplicates_across_splits(e: &Evidence) -> Option<Limitation> {
    let (test, validation) = e.duplicated_into_evaluation;
    (test + validation > 0).then(|| Limitation::new(
        "duplicates_across_splits",
        "Evaluation rows repeat training rows",
        format!("{test} test rows and {validation} validation rows are exact copies (features and target) of training rows; held-out figures are optimistic by as much as those rows are memorised"),
        "no evaluation row identical to a training row (common practice: remove duplicates or split them together)".into(),
    ))
}

pub(super) fn repeated_key_across_splits(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> = e
        .crossing_keys
        .iter()
        .filter(|(_, crossing, _, _)| *crossing > 0)
        .map(|(c, crossing, values, rows)| format!("{c}: {crossing} of {values} values occur in more than one split, and {rows} validation or test rows share a value with training rows"))
        .collect();
    (!flagged.is_empty()).then(|| {
        Limitation::new(
            "repeated_key_across_splits",
            "The same units appear in training and evaluation",
            format!(
                "{}; held-out figures then describe units the model has seen, not new ones (set [split] group to keep them together)",
                flagged.join("; ")
            ),
            "every value of a repeated id or group column in one split only (common practice)".into(),
        )
    })
}
