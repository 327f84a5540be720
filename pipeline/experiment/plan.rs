//! The run plan: the grid's configurations (plus the linear baseline) times the seeds, each run
//! named by a hash of what decides its bits (the experiment's run inputs, from layout 8; the
//! experiment fingerprint before), its resolved configuration and its seed.

use serde::{Deserialize, Serialize};
use serde_json::Value;
use std::collections::BTreeMap;

use crate::fingerprint::sha256_hex;
use crate::manifest::grid::expand;
use crate::manifest::{Activation, Manifest, ModelSpec};
use crate::training::RunConfig;

/// One configuration of the plan: a grid point or the baseline.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct PlannedConfig {
    /// First 12 hex digits of SHA-256 of the canonical configuration.
    pub id: String,
    pub baseline: bool,
    /// Grid values of this configuration (empty for the baseline and without a grid).
    pub overrides: BTreeMap<String, Value>,
    pub config: RunConfig,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RunSpec {
    /// First 16 hex digits of SHA-256 over (experiment fingerprint, configuration, seed).
    pub id: String,
    pub config_id: String,
    pub seed: u64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    pub configs: Vec<PlannedConfig>,
    pub runs: Vec<RunSpec>,
}

impl Plan {
    pub fn config(&self, id: &str) -> Option<&PlannedConfig> {
        self.configs.iter().find(|c| c.id == id)
    }
}

/// A configuration's short label: its grid overrides as `key=value` (last key segment), or
/// "linear baseline" / "base configuration".
pub fn config_label(overrides: &std::collections::BTreeMap<String, serde_json::Value>, baseline: bool) -> String {
    if baseline {
        return "linear baseline".into();
    }
    if overrides.is_empty() {
        return "base configuration".into();
    }
    overrides.iter().map(|(k, v)| format!("{}={}", k.rsplit('.').next().unwrap_or(k), v)).collect::<Vec<_>>().join(" ")
}

/// The linear baseline: no hidden layer, no architectural regularizer, same training settings.
pub fn baseline_config(manifest: &Manifest) -> RunConfig {
    RunConfig {
        model: ModelSpec {
            hidden: Vec::new(),
            activation: Activation::Identity,
            residual: false,
            batch_norm: false,
            dropout: 0.0,
            input_noise: 0.0,
        },
        training: manifest.training.clone(),
    }
}

fn planned(config: RunConfig, baseline: bool, overrides: BTreeMap<String, Value>) -> PlannedConfig {
    let id = sha256_hex(config.canonical_json().as_bytes())[..12].to_string();
    PlannedConfig { id, baseline, overrides, config }
}

/// What a plan's run ids are derived from, with each run's configuration and seed.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum RunNaming {
    /// From layout 8: the experiment's run-inputs digest (`Experiment::run_inputs_sha256`), so a
    /// run that would compute the same bits has the same id in every experiment.
    Inputs(String),
    /// Layouts 2 to 7: the experiment fingerprint, so every experiment named its own runs.
    Fingerprint(String),
}

/// Expands a validated manifest into its plan. The manifest loader has already checked the grid;
/// a grid that fails to expand here is an internal error, never an empty plan.
pub fn build(manifest: &Manifest, naming: &RunNaming) -> crate::error::Result<Plan> {
    let points =
        expand(manifest).map_err(|p| crate::error::Error::Internal(format!("the validated grid does not expand: {}", p.message)))?;
    let mut configs: Vec<PlannedConfig> =
        points.into_iter().map(|p| planned(RunConfig { model: p.model, training: p.training }, false, p.overrides)).collect();
    if manifest.selection.baseline {
        configs.push(planned(baseline_config(manifest), true, BTreeMap::new()));
    }
    let mut runs = Vec::new();
    for c in &configs {
        for &seed in &manifest.sweep.seeds {
            let material = match naming {
                RunNaming::Inputs(inputs) => format!("tabcard-run-v1\n{inputs}\n{}\n{seed}", c.config.canonical_json()),
                RunNaming::Fingerprint(fingerprint) => format!("{fingerprint}\n{}\n{seed}", c.config.canonical_json()),
            };
            runs.push(RunSpec { id: sha256_hex(material.as_bytes())[..16].to_string(), config_id: c.id.clone(), seed });
        }
    }
    Ok(Plan { configs, runs })
}
