//! What a limitation rule returns ([`Limitation`]) and the thresholds the rules judge by, each
//! with its source beside the rule that uses it.

use serde::Serialize;

#[derive(Debug, Clone, PartialEq, Serialize)]
pub(crate) struct Limitation {
    pub rule: &'static str,
    pub title: String,
    pub finding: String,
    pub threshold: String,
    /// Serious enough to change which model a reviewer should prefer, or whether to use one at
    /// all: the card's headline repeats it.
    pub serious: bool,
}

impl Limitation {
    pub(super) fn new(rule: &'static str, title: &str, finding: String, threshold: String) -> Self {
        Limitation { rule, title: title.into(), finding, threshold, serious: false }
    }

    pub(super) fn serious(self) -> Self {
        Limitation { serious: true, ..self }
    }
}

pub(crate) const MIN_ROWS_PER_PARAMETER: f64 = 10.0;
pub(crate) const MINORITY_SHARE: f64 = 0.10;
/// A class is also judged against its fair share 1/K: flagged under half of it, so a balanced
/// many-class table (ten digits at 9.7% to 10.2%) is not flagged for being many-class. Common
/// practice, a rule of thumb; for two or three classes the 10% floor is the stricter bound.
pub(crate) const MINORITY_FAIR_SHARE_FACTOR: f64 = 0.5;
pub(crate) const MIN_TEST_ROWS_PER_CLASS: usize = 30;
pub(crate) const MIN_TEST_ROWS_REGRESSION: usize = 100;
/// Seed standard deviation above this share of the metric's scale is flagged.
pub(crate) const SEED_SD_SHARE: f64 = 0.01;
/// A train-validation gap above this share of the metric's scale is flagged.
pub(crate) const GAP_SHARE: f64 = 0.05;
/// The gap at which few rows per parameter are said to show: half the large-gap limit.
pub(crate) const FEW_ROWS_GAP_SHARE: f64 = GAP_SHARE / 2.0;
pub(crate) const ECE_LIMIT: f64 = 0.05;
/// The four-fifths rule: a selection rate below 4/5 of the most favoured group's is evidence of
/// adverse impact (US Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D), 1978).
pub(crate) const FOUR_FIFTHS: f64 = 0.8;
pub(crate) const MISSING_SHARE: f64 = 0.20;
/// The grid-edge rule applies to keys searched over at least this many ordered values.
pub(crate) const GRID_EDGE_MIN_VALUES: usize = 3;
