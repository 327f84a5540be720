//! A figure of an analysis with its 95% percentile interval.

use serde::{Deserialize, Serialize};

/// A figure with its 95% percentile interval (the bounds equal the value without resamples).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub(crate) struct Estimate {
    pub value: f64,
    pub lower: f64,
    pub upper: f64,
}
