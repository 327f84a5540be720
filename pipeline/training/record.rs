//! What one run leaves: its outcome (completed, diverged, failed), one record per epoch, and the
//! [`RunResult`] handed to the store.

use serde::{Deserialize, Serialize};

use super::head::TargetScaling;
use crate::metrics::MetricSet;
use crate::nn::mlp::NamedTensor;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EpochRecord {
    pub epoch: usize,
    /// Mean training loss over the epoch's batches (with dropout and noise active).
    pub train_loss: f64,
    /// Validation loss in evaluation mode.
    pub validation_loss: f64,
    /// The selection metric on the validation rows.
    pub validation_metric: Option<f64>,
    pub learning_rate: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(tag = "status", rename_all = "snake_case")]
pub enum Outcome {
    Completed,
    Diverged {
        epoch: usize,
        detail: String,
    },
    /// The engine failed (an error, not a numerical divergence).
    Failed {
        detail: String,
    },
}

impl Outcome {
    pub fn is_completed(&self) -> bool {
        matches!(self, Outcome::Completed)
    }

    pub fn describe(&self) -> String {
        match self {
            Outcome::Completed => "completed".into(),
            Outcome::Diverged { epoch, detail } => format!("diverged in epoch {epoch}: {detail}"),
            Outcome::Failed { detail } => format!("failed: {detail}"),
        }
    }
}

pub struct RunResult {
    pub outcome: Outcome,
    pub tensors: Vec<NamedTensor>,
    pub history: Vec<EpochRecord>,
    /// Epoch (1-based) whose weights were kept.
    pub best_epoch: usize,
    pub stopped_early: bool,
    pub parameter_count: usize,
    pub target_scaling: Option<TargetScaling>,
    pub train_metrics: MetricSet,
    pub validation_metrics: MetricSet,
    /// Per validation row: class probabilities (row-major, k per row) or the prediction.
    pub validation_outputs: Vec<f64>,
    /// How many threads computed pieces of the run (speed only; kept in the run's timing record).
    pub threads_taken: usize,
}
