//! The experiment's timing record (`timing.json`): when it was trained, from which commit of the
//! manifest's repository, with how many workers and how long each run took. It is the one
//! experiment file outside the integrity list: it may differ between two identical sweeps.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TimingRecord {
    /// RFC 3339 UTC time the selection was made.
    pub trained_at: String,
    /// The manifest repository's commit, when the manifest is in git.
    pub git_commit: Option<String>,
    /// Whether that repository had uncommitted changes to tracked files.
    pub git_dirty: Option<bool>,
    pub jobs: usize,
    /// Wall time of the whole `train` invocation.
    pub wall_seconds: f64,
    /// Training time of every stored run, by run id.
    pub run_seconds: BTreeMap<String, f64>,
    /// Wall time of each phase of the invocation, in order (absent before tabcard 0.5).
    #[serde(default)]
    pub phases: Vec<Phase>,
}

/// One phase of a `train` invocation and its wall time.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Phase {
    pub name: String,
    pub seconds: f64,
}

/// Names of the phases `train` times.
pub mod phase {
    /// File hash and the first pass over the data (content hash, checks, summary, split, fit).
    pub const SCAN: &str = "read, hash and check the data";
    /// The second pass: the training and validation matrices.
    pub const MATRICES: &str = "build the training and validation matrices";
    pub const SWEEP: &str = "train the runs";
    /// Test matrix, selection and the test evaluation.
    pub const SELECT: &str = "select and test";
}
