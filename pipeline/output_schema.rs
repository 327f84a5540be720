//! The scoring-output schema: the columns `predict` writes, in order, and the names reserved for
//! the columns later versions add. Versioned: a change of a name, type or meaning is a new
//! version, recorded in every output (Parquet key-value metadata, or a CSV column), and the
//! README's table documents each version.

/// The schema version `predict` writes.
pub const VERSION: u32 = 3;

/// The input row's 0-based position in the scored file.
pub const ROW: &str = "row";
/// Regression: the predicted value, in the target's units.
pub const PREDICTION: &str = "prediction";
/// Regression, folders with a prediction interval (layout 5 on): its bounds, prediction minus
/// and plus the split conformal half-width (schema version 2).
pub const INTERVAL_LOWER: &str = "interval_lower";
pub const INTERVAL_UPPER: &str = "interval_upper";
/// Classification: `p_<label>`, the probability of a class (binary: the positive class only);
/// calibrated by the folder's map when it holds one (schema version 2).
pub const PROBABILITY_PREFIX: &str = "p_";
/// Classification: the class decided (binary: at the deployed threshold; multiclass: the most
/// probable class).
pub const DECISION: &str = "decision";
/// Binary: the deployed threshold the decision used.
pub const DECISION_THRESHOLD: &str = "decision_threshold";
/// Binary: whether the decision is the outcome declared favourable to the person (null when the
/// manifest declares none).
pub const DECISION_FAVOURABLE: &str = "decision_favourable";
/// Whether any numeric input lies outside its training range.
pub const OUTSIDE_TRAINING_RANGE: &str = "outside_training_range";
/// The columns that flagged a row, each a JSON array of column names (`[]` when none).
pub const OUTSIDE_RANGE_COLUMNS: &str = "outside_range_columns";
pub const IMPUTED_COLUMNS: &str = "imputed_columns";
pub const UNSEEN_LEVEL_COLUMNS: &str = "unseen_level_columns";
/// CSV only (Parquet: key-value metadata): the stored model that scored, and the results digest
/// of the folder it is stored in.
pub const MODEL_ID: &str = "model_id";
pub const RESULTS_DIGEST: &str = "results_digest";
/// CSV only (Parquet: key-value metadata): this schema's version.
pub const SCHEMA_VERSION: &str = "scoring_schema";

/// With `--reasons N` (schema version 3): the row's principal reasons, each a JSON array, most
/// important first: the reason texts (`[reasons]` in the manifest, else the column name), the
/// features, and their contributions (integrated gradients: log-odds for classifiers, target
/// units for regression; positive toward the positive or explained class, or a higher
/// prediction); and |sum of all contributions - (f(row) - f(reference))|, the completeness gap.
pub const REASONS: &str = "reasons";
pub const REASON_FEATURES: &str = "reason_features";
pub const REASON_CONTRIBUTIONS: &str = "reason_contributions";
pub const REASONS_GAP: &str = "reasons_gap";
/// With `--reasons`: f(row) - f(reference), the move the contributions split.
pub const REASONS_TOTAL: &str = "reasons_total";

/// Names reserved for coming capabilities (none today).
pub const RESERVED: &[&str] = &[];

/// Parquet key-value metadata keys.
pub const META_SCHEMA_VERSION: &str = "tabcard.scoring_schema";
pub const META_MODEL_ID: &str = "tabcard.model_id";
pub const META_RESULTS_DIGEST: &str = "tabcard.results_digest";
pub const META_EXPERIMENT: &str = "tabcard.experiment";
/// With `--reasons`: the reference row, the integration steps and the completeness tolerance.
pub const META_REASONS: &str = "tabcard.reasons";

/// Every fixed output name (probability columns aside), reserved ones included: an id column may
/// take none of them.
pub const FIXED_NAMES: &[&str] = &[
    ROW,
    PREDICTION,
    DECISION,
    DECISION_THRESHOLD,
    DECISION_FAVOURABLE,
    OUTSIDE_TRAINING_RANGE,
    OUTSIDE_RANGE_COLUMNS,
    IMPUTED_COLUMNS,
    UNSEEN_LEVEL_COLUMNS,
    MODEL_ID,
    RESULTS_DIGEST,
    SCHEMA_VERSION,
    INTERVAL_LOWER,
    INTERVAL_UPPER,
    REASONS,
    REASON_FEATURES,
    REASON_CONTRIBUTIONS,
    REASONS_GAP,
    REASONS_TOTAL,
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reserved_names_are_fixed_names() {
        assert!(RESERVED.iter().all(|r| FIXED_NAMES.contains(r)));
        let mut seen = std::collections::BTreeSet::new();
        assert!(FIXED_NAMES.iter().all(|n| seen.insert(n)), "no name twice");
    }
}
