//! The experiment manifest's schema: every section and key, its type and its documented default.
//! Parsing rejects unknown keys; value ranges and cross-key rules live in `validate.rs`.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

/// One experiment, fully resolved (defaults filled in).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Manifest {
    pub experiment: ExperimentInfo,
    pub data: DataSpec,
    #[serde(default)]
    pub split: SplitSpec,
    #[serde(default)]
    pub model: ModelSpec,
    #[serde(default)]
    pub training: TrainingSpec,
    #[serde(default)]
    pub selection: SelectionSpec,
    #[serde(default)]
    pub sweep: SweepSpec,
    /// The decision the model's output feeds (binary tasks); absent: Youden's J on validation,
    /// no favourable outcome declared.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub decision: Option<DecisionSpec>,
    /// What is fitted on held-out rows after training: a classifier's probability map, a
    /// regression model's prediction interval; absent: no map, 90% intervals.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<CalibrationSpec>,
    /// How the decision's disparity across `data.group_columns` is judged; absent: the defaults.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fairness: Option<FairnessSpec>,
    /// What drives the model: the analyses' settings; absent: the defaults.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub analysis: Option<AnalysisSpec>,
    /// `[reasons]`: the text a scored row's principal reason gives for each feature (a feature
    /// with none keeps its column name).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reasons: Option<std::collections::BTreeMap<String, String>>,
    /// `[monitoring]`: when `monitor` reads a batch's drift as watch or act; absent: the defaults.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub monitoring: Option<MonitoringSpec>,
}

/// `[monitoring]`: the thresholds `monitor` judges a batch by. A column's population reads
/// "watch" when its stability index reaches `psi_watch` and "act" at `psi_act` (0.1 and 0.25 are
/// common practice), each only when the chi-square test also rejects "same population" at
/// `alpha` (our choice: 0.01), so a small batch's noise does not raise an alarm.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct MonitoringSpec {
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub psi_watch: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub psi_act: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub alpha: Option<f64>,
}

/// The stability index at which a population reads "watch" (common practice).
pub const DEFAULT_PSI_WATCH: f64 = 0.1;
/// The stability index at which a population reads "act" (common practice).
pub const DEFAULT_PSI_ACT: f64 = 0.25;
/// The level of the tests that gate every monitoring status (our choice).
pub const DEFAULT_MONITOR_ALPHA: f64 = 0.01;

impl MonitoringSpec {
    pub fn psi_watch(&self) -> f64 {
        self.psi_watch.unwrap_or(DEFAULT_PSI_WATCH)
    }
    pub fn psi_act(&self) -> f64 {
        self.psi_act.unwrap_or(DEFAULT_PSI_ACT)
    }
    pub fn alpha(&self) -> f64 {
        self.alpha.unwrap_or(DEFAULT_MONITOR_ALPHA)
    }
}

/// `[analysis]`: permutation importance of each raw feature on the test rows, the sensitivity
/// table and curves, and the reference rows principal reasons are measured from. The keys added
/// after `permutation_repeats` are optional, so a manifest without them keeps its canonical hash.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct AnalysisSpec {
    /// Permutations of each feature (each on its own bootstrap resample of the test rows).
    #[serde(default = "default_permutation_repeats")]
    pub permutation_repeats: usize,
    /// Partial dependence and ICE curves for this many of the most important features (default 6).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub curve_features: Option<usize>,
    /// Binary models: training rows scored at or just above the deployed threshold that the
    /// threshold reference averages, at least (default 30).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reference_rows: Option<usize>,
    /// Intervals of the integrated-gradients path integral (trapezoid rule, even; default 32).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub integration_steps: Option<usize>,
    /// Features a reviewer listed as not to be used for decisions though they stay inputs (for
    /// instance proxies); the card flags the model when it leans on one.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub sensitive: Vec<String>,
}

fn default_permutation_repeats() -> usize {
    20
}

/// Curves drawn by default: the six most important features.
pub const DEFAULT_CURVE_FEATURES: usize = 6;
/// Rows the threshold reference averages by default.
pub const DEFAULT_REFERENCE_ROWS: usize = 30;
/// Integrated-gradients steps by default.
pub const DEFAULT_INTEGRATION_STEPS: usize = 32;

impl AnalysisSpec {
    pub fn curve_features(&self) -> usize {
        self.curve_features.unwrap_or(DEFAULT_CURVE_FEATURES)
    }
    pub fn reference_rows(&self) -> usize {
        self.reference_rows.unwrap_or(DEFAULT_REFERENCE_ROWS)
    }
    pub fn integration_steps(&self) -> usize {
        self.integration_steps.unwrap_or(DEFAULT_INTEGRATION_STEPS)
    }
}

impl Default for AnalysisSpec {
    fn default() -> Self {
        AnalysisSpec {
            permutation_repeats: default_permutation_repeats(),
            curve_features: None,
            reference_rows: None,
            integration_steps: None,
            sensitive: Vec::new(),
        }
    }
}

/// `[fairness]`: the disparity analysis of the deployed decision across group columns.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FairnessSpec {
    /// Groups with fewer test rows are reported but not judged (common practice: 30).
    #[serde(default = "default_minimum_group_rows")]
    pub minimum_group_rows: usize,
    /// A true- or false-positive rate gap larger than this, beyond its interval, is flagged
    /// (common practice: 0.1).
    #[serde(default = "default_rate_gap")]
    pub rate_gap: f64,
    /// Pairs of group columns whose combinations are analysed as groups too.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub intersections: Vec<Vec<String>>,
    /// Also fit a linear probe from the network's inputs to each group column (training rows)
    /// and report how well it predicts the group on the test rows.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub proxy_check: bool,
}

fn default_minimum_group_rows() -> usize {
    30
}

fn default_rate_gap() -> f64 {
    0.1
}

impl Default for FairnessSpec {
    fn default() -> Self {
        FairnessSpec {
            minimum_group_rows: default_minimum_group_rows(),
            rate_gap: default_rate_gap(),
            intersections: Vec::new(),
            proxy_check: false,
        }
    }
}

/// Coverage of a regression model's prediction interval when the manifest names none.
pub const DEFAULT_COVERAGE: f64 = 0.9;

/// `[calibration]`: fitted on the validation rows of the selected run, after selection, so no
/// trained bit moves.
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CalibrationSpec {
    /// Classifiers: how probabilities are recalibrated (`none`, `temperature`, `platt`,
    /// `isotonic`).
    #[serde(default)]
    pub method: crate::calibrate::CalibrationMethod,
    /// Regression: the coverage 1 - alpha of the split conformal interval, in (0, 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub coverage: Option<f64>,
    /// Classifiers: a reliability table per class (one against the rest) beside the top-label one.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub per_class_reliability: bool,
}

impl CalibrationSpec {
    /// The interval coverage a regression model gets.
    pub fn coverage(&self) -> f64 {
        self.coverage.unwrap_or(DEFAULT_COVERAGE)
    }
}

/// The declared decision: which outcome favours the person, and how the deployed threshold on
/// the positive-class probability is set (positive when the probability is at least it).
#[derive(Debug, Clone, PartialEq, Default, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DecisionSpec {
    /// The class label whose outcome is favourable to the person the row describes (for a lease
    /// default model, the label of "no default").
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub favourable: Option<String>,
    #[serde(default)]
    pub threshold: ThresholdRule,
    /// With `threshold = "fixed"`: the threshold itself, in (0, 1).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub fixed_threshold: Option<f64>,
    /// With `threshold = "expected_cost"`: the cost of a false positive (a row predicted positive
    /// whose outcome is negative) and of a false negative, in any one unit.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cost_false_positive: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cost_false_negative: Option<f64>,
}

impl DecisionSpec {
    /// The threshold the rule gives without looking at data: the fixed one, or the expected-cost
    /// one, c_FP / (c_FP + c_FN) (Elkan 2001, "The foundations of cost-sensitive learning",
    /// Theorem 1 with zero cost for correct decisions; it assumes calibrated probabilities).
    /// `None` for a rule chosen on validation data.
    pub fn threshold_without_data(&self) -> Option<f64> {
        match self.threshold {
            ThresholdRule::YoudenJOnValidation => None,
            ThresholdRule::Fixed => self.fixed_threshold,
            ThresholdRule::ExpectedCost => match (self.cost_false_positive, self.cost_false_negative) {
                (Some(fp), Some(fn_)) => Some(fp / (fp + fn_)),
                _ => None,
            },
        }
    }
}

/// How the deployed threshold is set.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum ThresholdRule {
    /// The threshold maximising Youden's J (true-positive rate minus false-positive rate) on the
    /// validation rows (Youden 1950).
    #[default]
    YoudenJOnValidation,
    /// A threshold the manifest states.
    Fixed,
    /// The threshold minimising expected cost from stated costs of errors (Elkan 2001).
    ExpectedCost,
}

impl ThresholdRule {
    pub fn as_str(self) -> &'static str {
        match self {
            ThresholdRule::YoudenJOnValidation => "youden_j_on_validation",
            ThresholdRule::Fixed => "fixed",
            ThresholdRule::ExpectedCost => "expected_cost",
        }
    }
}

/// Who owns the experiment and what the model is for.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ExperimentInfo {
    pub name: String,
    #[serde(default)]
    pub description: String,
    #[serde(default)]
    pub intended_use: String,
    #[serde(default)]
    pub out_of_scope: String,
    #[serde(default)]
    pub owner: String,
    /// Whether the model's outputs feed decisions about people (credit, insurance, health,
    /// employment). Defaults to true: the card then carries the cautions such use requires.
    #[serde(default = "yes")]
    pub affects_people: bool,
    /// The period the data covers ("loans signed 2019-01 to 2023-06"), for the card.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub data_period: String,
    /// Who the rows describe and how they were chosen, for the card.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub population: String,
    /// Who trained the model (person or team), for the card's sign-off block.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub trained_by: String,
    /// The model's name in the team's inventory ("lease-default-scorer"), for the card.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub model_name: String,
    /// Its version in that inventory ("2.1"), for the card.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub model_version: String,
    /// The experiment fingerprint (16 to 64 hexadecimal digits) of the model this one replaces.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub replaces: String,
    /// Limitations the team knows of that no rule can see (how the rows were selected, what the
    /// target leaves out), shown first under the card's known limitations.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub known_limitations: String,
    /// How the model will be watched after approval: which batches, how often, who reads the
    /// monitoring records and what an "act" triggers.
    #[serde(default, skip_serializing_if = "String::is_empty")]
    pub monitoring_plan: String,
}

pub use crate::task::Task;

/// Where the data is and how its columns are used.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct DataSpec {
    /// Parquet file, relative to the manifest's folder.
    pub path: String,
    pub target: String,
    pub task: Task,
    /// Columns to use as features; empty means every column not named as target, id or dropped.
    #[serde(default)]
    pub features: Vec<String>,
    #[serde(default)]
    pub drop: Vec<String>,
    /// Numeric columns to treat as categories (string and dictionary columns always are).
    #[serde(default)]
    pub categorical: Vec<String>,
    /// Row identifiers: never features, carried through to predictions.
    #[serde(default)]
    pub ids: Vec<String>,
    /// For a binary task with a string target: the label that counts as positive.
    #[serde(default)]
    pub positive_label: Option<String>,
    /// Columns describing groups of people, for per-group metrics; not used as features.
    #[serde(default)]
    pub group_columns: Vec<String>,
}

/// How rows are split into training, validation and test sets.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SplitSpec {
    #[serde(default = "default_fraction")]
    pub validation: f64,
    #[serde(default = "default_fraction")]
    pub test: f64,
    /// Keep class shares equal across splits (classification only).
    #[serde(default = "yes")]
    pub stratify: bool,
    #[serde(default)]
    pub seed: u64,
    /// A column that assigns each row to a split (by time or by a pre-agreed assignment); the
    /// fractions and seed are then unused. Never a feature.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub column: Option<String>,
    /// The values of `column` that name each split.
    #[serde(default, skip_serializing_if = "SplitLabels::is_default")]
    pub labels: SplitLabels,
    /// A column whose rows stay together: every row of one value lands in one split (seeded, and
    /// stratified by the group's most common class where `stratify` holds). Never a feature.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub group: Option<String>,
}

impl Default for SplitSpec {
    fn default() -> Self {
        SplitSpec { validation: 0.2, test: 0.2, stratify: true, seed: 0, column: None, labels: SplitLabels::default(), group: None }
    }
}

/// Which values of a split column mean training, validation and test.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SplitLabels {
    #[serde(default = "train_labels")]
    pub train: Vec<String>,
    #[serde(default = "validation_labels")]
    pub validation: Vec<String>,
    #[serde(default = "test_labels")]
    pub test: Vec<String>,
}

impl Default for SplitLabels {
    fn default() -> Self {
        SplitLabels { train: train_labels(), validation: validation_labels(), test: test_labels() }
    }
}

impl SplitLabels {
    pub fn is_default(&self) -> bool {
        *self == SplitLabels::default()
    }
}

fn train_labels() -> Vec<String> {
    vec!["train".into()]
}
fn validation_labels() -> Vec<String> {
    vec!["validation".into()]
}
fn test_labels() -> Vec<String> {
    vec!["test".into()]
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Activation {
    Relu,
    Sigmoid,
    Tanh,
    Gelu,
    Identity,
}

impl Activation {
    pub fn as_str(self) -> &'static str {
        match self {
            Activation::Relu => "relu",
            Activation::Sigmoid => "sigmoid",
            Activation::Tanh => "tanh",
            Activation::Gelu => "gelu",
            Activation::Identity => "identity",
        }
    }
}

/// The network's architecture and its architectural regularizers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ModelSpec {
    /// Widths of the hidden layers, input side first.
    #[serde(default = "default_hidden")]
    pub hidden: Vec<usize>,
    #[serde(default = "default_activation")]
    pub activation: Activation,
    /// Hidden layers after the first become residual blocks x + f(x); widths must match.
    #[serde(default)]
    pub residual: bool,
    #[serde(default)]
    pub batch_norm: bool,
    /// Probability of dropping a hidden unit while training (inverted dropout).
    #[serde(default)]
    pub dropout: f64,
    /// Standard deviation of Gaussian noise added to standardised inputs while training.
    #[serde(default)]
    pub input_noise: f64,
}

impl Default for ModelSpec {
    fn default() -> Self {
        ModelSpec {
            hidden: default_hidden(),
            activation: default_activation(),
            residual: false,
            batch_norm: false,
            dropout: 0.0,
            input_noise: 0.0,
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Optimizer {
    Sgd,
    Adam,
    Adamw,
}

impl Optimizer {
    pub fn as_str(self) -> &'static str {
        match self {
            Optimizer::Sgd => "sgd",
            Optimizer::Adam => "adam",
            Optimizer::Adamw => "adamw",
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Schedule {
    Constant,
    Step,
    Cosine,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum RegressionLoss {
    Mse,
    Huber,
}

/// Optimisation settings and the training-time regularizers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TrainingSpec {
    #[serde(default = "default_optimizer")]
    pub optimizer: Optimizer,
    #[serde(default = "default_learning_rate")]
    pub learning_rate: f64,
    /// Decoupled weight decay (AdamW; plain decay for SGD): w <- w - lr * weight_decay * w.
    #[serde(default)]
    pub weight_decay: f64,
    /// Coupled L2 penalty: adds l2_penalty / 2 * ||W||^2 to the loss, so it passes through the
    /// optimizer's moment estimates.
    #[serde(default)]
    pub l2_penalty: f64,
    #[serde(default = "default_momentum")]
    pub momentum: f64,
    #[serde(default)]
    pub nesterov: bool,
    #[serde(default = "default_beta1")]
    pub beta1: f64,
    #[serde(default = "default_beta2")]
    pub beta2: f64,
    #[serde(default = "default_epsilon")]
    pub epsilon: f64,
    #[serde(default = "default_epochs")]
    pub epochs: usize,
    #[serde(default = "default_batch_size")]
    pub batch_size: usize,
    #[serde(default = "default_schedule")]
    pub schedule: Schedule,
    /// Epochs of linear warm-up before the schedule starts.
    #[serde(default)]
    pub warmup_epochs: usize,
    /// Step schedule: multiply the rate by `step_gamma` every `step_epochs` epochs.
    #[serde(default = "default_step_epochs")]
    pub step_epochs: usize,
    #[serde(default = "default_step_gamma")]
    pub step_gamma: f64,
    /// Clip the global gradient norm to this value; 0 turns clipping off.
    #[serde(default)]
    pub clip_norm: f64,
    /// Regression only: mean squared error or Huber.
    #[serde(default = "default_regression_loss")]
    pub loss: RegressionLoss,
    #[serde(default = "default_huber_delta")]
    pub huber_delta: f64,
    #[serde(default)]
    pub early_stopping: EarlyStopping,
}

impl Default for TrainingSpec {
    fn default() -> Self {
        TrainingSpec {
            optimizer: default_optimizer(),
            learning_rate: default_learning_rate(),
            weight_decay: 0.0,
            l2_penalty: 0.0,
            momentum: default_momentum(),
            nesterov: false,
            beta1: default_beta1(),
            beta2: default_beta2(),
            epsilon: default_epsilon(),
            epochs: default_epochs(),
            batch_size: default_batch_size(),
            schedule: default_schedule(),
            warmup_epochs: 0,
            step_epochs: default_step_epochs(),
            step_gamma: default_step_gamma(),
            clip_norm: 0.0,
            loss: default_regression_loss(),
            huber_delta: default_huber_delta(),
            early_stopping: EarlyStopping::default(),
        }
    }
}

/// Stop when the validation loss has not improved by `min_delta` for `patience` epochs, and keep the
/// best epoch's weights.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct EarlyStopping {
    #[serde(default = "yes")]
    pub enabled: bool,
    #[serde(default = "default_patience")]
    pub patience: usize,
    #[serde(default)]
    pub min_delta: f64,
}

impl Default for EarlyStopping {
    fn default() -> Self {
        EarlyStopping { enabled: true, patience: default_patience(), min_delta: 0.0 }
    }
}

/// How the best configuration is chosen.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SelectionSpec {
    /// Validation metric to select on; empty picks the task's default (binary: roc_auc,
    /// multiclass: log_loss, regression: rmse). Its direction follows from the metric.
    #[serde(default)]
    pub metric: String,
    /// Train a linear baseline (no hidden layer) on the same seeds.
    #[serde(default = "yes")]
    pub baseline: bool,
    /// Bootstrap resamples for the test-metric confidence intervals.
    #[serde(default = "default_bootstrap")]
    pub bootstrap: usize,
    /// How the configuration is picked from the validation summaries.
    #[serde(default, skip_serializing_if = "SelectionRule::is_best")]
    pub rule: SelectionRule,
    /// Deploy the mean of every seed's outputs of the selected configuration (a seed ensemble;
    /// Lakshminarayanan, Pritzel & Blundell, NeurIPS 2017) instead of its best seed alone.
    #[serde(default, skip_serializing_if = "std::ops::Not::not")]
    pub ensemble: bool,
}

impl Default for SelectionSpec {
    fn default() -> Self {
        SelectionSpec { metric: String::new(), baseline: true, bootstrap: default_bootstrap(), rule: SelectionRule::Best, ensemble: false }
    }
}

/// The rule that picks a configuration.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum SelectionRule {
    /// The best mean validation metric across seeds.
    #[default]
    Best,
    /// The configuration with the fewest parameters whose mean is within one standard error of
    /// the best mean (the best's seed standard deviation / sqrt(seeds)); common practice, after
    /// Breiman et al. 1984, "Classification and Regression Trees", section 3.4.3.
    OneStandardError,
}

impl SelectionRule {
    pub fn is_best(&self) -> bool {
        *self == SelectionRule::Best
    }

    pub fn as_str(self) -> &'static str {
        match self {
            SelectionRule::Best => "best",
            SelectionRule::OneStandardError => "one_standard_error",
        }
    }
}

/// The grid of configurations and the seeds each is trained with.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SweepSpec {
    #[serde(default = "default_seeds")]
    pub seeds: Vec<u64>,
    /// Dotted keys (`model.dropout`) to the list of values to try; the grid is their product.
    #[serde(default)]
    pub grid: BTreeMap<String, Vec<serde_json::Value>>,
    /// Refuse a plan with more runs than this.
    #[serde(default = "default_max_runs")]
    pub max_runs: usize,
}

impl Default for SweepSpec {
    fn default() -> Self {
        SweepSpec { seeds: default_seeds(), grid: BTreeMap::new(), max_runs: default_max_runs() }
    }
}

fn yes() -> bool {
    true
}
fn default_fraction() -> f64 {
    0.2
}
fn default_hidden() -> Vec<usize> {
    vec![64, 64]
}
fn default_activation() -> Activation {
    Activation::Relu
}
fn default_optimizer() -> Optimizer {
    Optimizer::Adamw
}
fn default_learning_rate() -> f64 {
    1e-3
}
fn default_momentum() -> f64 {
    0.9
}
fn default_beta1() -> f64 {
    0.9
}
fn default_beta2() -> f64 {
    0.999
}
fn default_epsilon() -> f64 {
    1e-8
}
fn default_epochs() -> usize {
    100
}
fn default_batch_size() -> usize {
    256
}
fn default_schedule() -> Schedule {
    Schedule::Constant
}
fn default_step_epochs() -> usize {
    10
}
fn default_step_gamma() -> f64 {
    0.5
}
fn default_regression_loss() -> RegressionLoss {
    RegressionLoss::Mse
}
fn default_huber_delta() -> f64 {
    1.0
}
fn default_patience() -> usize {
    10
}
fn default_bootstrap() -> usize {
    1000
}
fn default_seeds() -> Vec<u64> {
    vec![1, 2, 3]
}
fn default_max_runs() -> usize {
    500
}
