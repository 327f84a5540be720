//! The settings one run trains with ([`RunConfig`]): everything a grid can vary, resolved.

use serde::{Deserialize, Serialize};

use crate::manifest::{ModelSpec, TrainingSpec};

/// The settings one run trains with: everything a grid can vary, resolved.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunConfig {
    pub model: ModelSpec,
    pub training: TrainingSpec,
}

impl RunConfig {
    /// Compact JSON of the configuration. Plain structs of numbers, strings and lists always
    /// serialise; were that ever to fail, the panic names the invariant instead of hashing "".
    pub fn canonical_json(&self) -> String {
        serde_json::to_string(self).expect("a RunConfig of plain fields serialises to JSON")
    }
}
