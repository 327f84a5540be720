//! Limitation rules about the data and the split: missing values, rare levels, a small minority
//! class, features constant on the training rows, rows and keys that cross splits.

use super::finding::*;
use crate::card::evidence::Evidence;
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

pub(super) fn small_minority_class(e: &Evidence) -> Option<Limitation> {
    let (label, rows, share) = e.minority.as_ref()?;
    (*share < MINORITY_SHARE).then(|| {
        Limitation::new(
            "small_minority_class",
            "Small minority class",
            format!(
                "class \"{label}\" has {rows} rows ({}% of the table); accuracy at the default threshold says little for it",
                sig(100.0 * share, 3)
            ),
            format!("every class at least {}% of the rows (common practice)", 100.0 * MINORITY_SHARE),
        )
    })
}

pub(super) fn constant_on_training_rows(e: &Evidence) -> Option<Limitation> {
    (!e.constant_on_training.is_empty()).then(|| {
        Limitation::new(
            "constant_on_training_rows",
            "Features constant on the training rows",
            format!(
                "{} take one value on every training row, so the model cannot learn from them, yet they vary in validation or test",
                e.constant_on_training.join(", ")
            ),
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
