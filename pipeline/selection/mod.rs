//! Aggregation across seeds and model selection: per configuration the mean and standard deviation
//! of every validation metric and the train-validation gap; the best configuration by the
//! manifest's metric; and one evaluation of the selected configuration on the test split, with
//! seeded bootstrap intervals for the selected run's test metrics.

pub(crate) mod deployed;
pub(crate) mod scoring;
pub(crate) mod serving;

use serde::{Deserialize, Serialize};
use serde_json::Value;
use std::collections::BTreeMap;

use crate::calibrate::{self, CalibrationMap, CalibrationMethod};
use crate::data::prep::Matrix;
use crate::error::{Error, Result};
use crate::experiment::plan::Plan;
use crate::experiment::prepared::Prepared;
use crate::manifest::{CalibrationSpec, DecisionSpec, SelectionRule, ThresholdRule};
use crate::metrics::bootstrap::{percentile_intervals, shared_percentile_intervals, Interval, ResampleOrder, Scorer};
use crate::metrics::calibration::{class_table, reliability_bins, top_label_table, ReliabilityBin};
use crate::metrics::classification::{confusion_matrix, per_class, predicted_classes, ClassReport};
use crate::metrics::classification::{operating_point_at, youden_threshold};
use crate::metrics::registry::{better, direction, Direction};
use crate::metrics::resample::decision_metrics;
use crate::metrics::MetricSet;
use crate::selection::deployed::{
    fit_interval, mean_outputs, CalibrationReport, EnsembleReport, IntervalReport, CALIBRATION_FROM, CALIBRATION_METRICS,
    FITTED_ON_VALIDATION,
};
use crate::selection::scoring::ScoringModel;
use crate::store::run::StoredRun;
use crate::training::head::ResampleScorer;
use crate::training::Labels;

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Spread {
    pub mean: f64,
    /// Sample standard deviation across seeds (0 for a single seed).
    pub sd: f64,
    pub n: usize,
}

pub(crate) fn spread(values: &[f64]) -> Option<Spread> {
    if values.is_empty() {
        return None;
    }
    let n = values.len();
    let mean = values.iter().sum::<f64>() / n as f64;
    let sd = if n > 1 { (values.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt() } else { 0.0 };
    Some(Spread { mean, sd, n })
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ConfigSummary {
    pub config_id: String,
    pub baseline: bool,
    pub overrides: BTreeMap<String, Value>,
    pub parameter_count: usize,
    pub runs_completed: usize,
    pub runs_failed: usize,
    pub validation: BTreeMap<String, Spread>,
    pub train: BTreeMap<String, Spread>,
    /// Training minus validation value of the selection metric, per seed, aggregated.
    pub gap: Option<Spread>,
    pub best_epoch: Option<Spread>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct TestEvaluation {
    pub run_id: String,
    pub seed: u64,
    pub rows: usize,
    pub metrics: MetricSet,
    pub intervals: BTreeMap<String, Interval>,
    /// Test metrics of every seed of the selected configuration, aggregated.
    pub across_seeds: BTreeMap<String, Spread>,
    /// Layout 5 on: the top-label table ECE is computed from, for every classifier; layouts 3
    /// and 4: the positive-class table of binary models.
    pub reliability: Vec<ReliabilityBin>,
    /// One table per class against the rest, when `[calibration] per_class_reliability` asks.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub reliability_per_class: Vec<ClassReliability>,
    pub confusion: Vec<Vec<usize>>,
    pub per_class: Vec<ClassReport>,
    /// Test metrics of the selected run per level of each group column named in the manifest.
    pub groups: Vec<GroupMetrics>,
    /// Binary models: the decision threshold chosen on the validation rows, and the test
    /// confusion matrix and per-class report at that threshold (the fields above use 0.5).
    #[serde(default)]
    pub chosen_threshold: Option<ThresholdReport>,
}

/// The deployed decision threshold (layout 4; in earlier folders a threshold reported beside
/// the deployed 0.5), its rates on the validation rows and what it does on the test split.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ThresholdReport {
    /// How the threshold was set (stored as `youden_j_on_validation`, `fixed`, `expected_cost`).
    pub rule: ThresholdRule,
    /// Predict positive when the positive-class probability is at least this.
    pub threshold: f64,
    /// True- and false-positive rates on the validation rows at the threshold.
    pub validation_tpr: f64,
    pub validation_fpr: f64,
    pub confusion: Vec<Vec<usize>>,
    pub per_class: Vec<ClassReport>,
    /// The stated costs of a false positive and a false negative (`expected_cost` only).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cost_false_positive: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub cost_false_negative: Option<f64>,
    /// Layout 5 on: accuracy and balanced accuracy of the test rows decided at the threshold,
    /// with 95% bootstrap intervals on the same resamples as the other test figures.
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub metrics: BTreeMap<String, Interval>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct GroupMetrics {
    pub column: String,
    pub level: String,
    pub rows: usize,
    /// Binary: the share of positive rows; regression: the mean target; multiclass: none.
    #[serde(default)]
    pub base_rate: Option<f64>,
    pub metrics: MetricSet,
    /// 95% bootstrap intervals of the level's metrics (the same resampling as the whole split's).
    #[serde(default)]
    pub intervals: BTreeMap<String, Interval>,
}

/// A group column's label for each test row (`None` for nulls).
pub(crate) struct GroupColumn {
    pub name: String,
    pub labels: Vec<Option<String>>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Selection {
    pub metric: String,
    pub higher_is_better: bool,
    pub configs: Vec<ConfigSummary>,
    pub selected_config: String,
    pub selected_run: String,
    pub baseline_config: Option<String>,
    /// The rule that picked `selected_config` (`best` or `one_standard_error`); `best` in
    /// folders of tabcard 0.3, which had no other.
    #[serde(default)]
    pub rule: SelectionRule,
    /// The configuration with the best mean validation metric (equal to `selected_config` under
    /// the `best` rule; empty in folders of tabcard 0.3).
    #[serde(default)]
    pub best_config: String,
    pub test: TestEvaluation,
    /// Layout 5 on, classifiers with `[calibration] method`: the fitted map.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub calibration: Option<CalibrationReport>,
    /// Layout 5 on, regression: the split conformal prediction interval.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub interval: Option<IntervalReport>,
    /// Layout 5 on, `[selection] ensemble`: the seeds whose mean is deployed; the test figures
    /// above are the ensemble's.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub ensemble: Option<EnsembleReport>,
}

/// A class's one-against-the-rest reliability table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct ClassReliability {
    pub class: usize,
    pub bins: Vec<ReliabilityBin>,
}

/// The threshold a binary model decides at, as deployed.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct DeployedThreshold {
    pub value: f64,
    /// The threshold report it comes from; `None` for 0.5 in a folder trained before the declared
    /// decision (layout 4), or when the rule had no validation rows of both classes.
    pub report: Option<ThresholdReport>,
}

/// The first results layout whose threshold report is the deployed decision.
pub(crate) const DECLARED_DECISION_FROM: u32 = 4;

impl Selection {
    /// The threshold `predict` decides at for a binary model in a folder of layout
    /// `layout_version`: the recorded rule's from layout 4, else 0.5.
    pub(crate) fn deployed_threshold(&self, layout_version: u32) -> DeployedThreshold {
        match &self.test.chosen_threshold {
            Some(report) if layout_version >= DECLARED_DECISION_FROM => {
                DeployedThreshold { value: report.threshold, report: Some(report.clone()) }
            }
            _ => DeployedThreshold { value: 0.5, report: None },
        }
    }

    /// The selected configuration's summary across seeds.
    pub(crate) fn selected_summary(&self) -> Option<&ConfigSummary> {
        self.configs.iter().find(|c| c.config_id == self.selected_config)
    }

    /// A train-minus-validation gap of the selection metric (as `ConfigSummary::gap` stores it),
    /// signed so that positive always means worse on validation, whichever way the metric points.
    pub(crate) fn worse_on_validation(&self, train_minus_validation: f64) -> f64 {
        match crate::metrics::registry::Direction::of_higher_is_better(self.higher_is_better) {
            crate::metrics::registry::Direction::Maximise => train_minus_validation,
            crate::metrics::registry::Direction::Minimise => -train_minus_validation,
        }
    }
}

/// Mean and spread of each metric over several metric sets (undefined values left out).
fn spreads<'a>(sets: impl IntoIterator<Item = &'a MetricSet>) -> BTreeMap<String, Spread> {
    let mut by_name: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    for set in sets {
        for (k, v) in set {
            if let Some(v) = v {
                by_name.entry(k.clone()).or_default().push(*v);
            }
        }
    }
    by_name.into_iter().filter_map(|(k, v)| spread(&v).map(|s| (k, s))).collect()
}

/// Summaries per configuration, in plan order.
pub(crate) fn summarise(plan: &Plan, runs: &[StoredRun], metric: &str) -> Vec<ConfigSummary> {
    plan.configs
        .iter()
        .map(|c| {
            let mine: Vec<&StoredRun> = runs.iter().filter(|r| r.record.config_id == c.id).collect();
            let done: Vec<&StoredRun> = mine.iter().copied().filter(|r| r.record.outcome.is_completed()).collect();
            let gaps: Vec<f64> = done
                .iter()
                .filter_map(|r| Some(r.record.train.get(metric).copied().flatten()? - r.record.validation.get(metric).copied().flatten()?))
                .collect();
            let epochs: Vec<f64> = done.iter().map(|r| r.record.best_epoch as f64).collect();
            ConfigSummary {
                config_id: c.id.clone(),
                baseline: c.baseline,
                overrides: c.overrides.clone(),
                parameter_count: done.first().map(|r| r.record.parameter_count).unwrap_or(0),
                runs_completed: done.len(),
                runs_failed: mine.len() - done.len(),
                validation: spreads(done.iter().map(|r| &r.record.validation)),
                train: spreads(done.iter().map(|r| &r.record.train)),
                gap: spread(&gaps),
                best_epoch: spread(&epochs),
            }
        })
        .collect()
}

/// The standard error of a configuration's mean: its seed standard deviation over sqrt(seeds).
pub(crate) fn standard_error(s: &Spread) -> f64 {
    s.sd / (s.n.max(1) as f64).sqrt()
}

/// Non-baseline configurations other than `chosen` with fewer parameters whose mean validation
/// metric lies within one standard error of `chosen`'s mean (or beyond it, on the better side).
pub(crate) fn simpler_within_one_se<'a>(
    configs: &'a [ConfigSummary],
    chosen: &ConfigSummary,
    metric: &str,
    dir: Direction,
) -> Vec<&'a ConfigSummary> {
    let Some(best) = chosen.validation.get(metric) else { return Vec::new() };
    let se = standard_error(best);
    configs
        .iter()
        .filter(|c| !c.baseline && c.config_id != chosen.config_id && c.parameter_count < chosen.parameter_count)
        .filter(|c| {
            c.validation.get(metric).is_some_and(|s| match dir {
                Direction::Maximise => s.mean >= best.mean - se,
                Direction::Minimise => s.mean <= best.mean + se,
            })
        })
        .collect()
}

/// What [`select`] picked.
pub(crate) struct Picked {
    pub configs: Vec<ConfigSummary>,
    pub selected_config: String,
    pub selected_run: String,
    pub best_config: String,
}

/// Selects a non-baseline configuration by mean validation metric (first in plan order on ties):
/// the best, or under `one_standard_error` the one with the fewest parameters within one
/// standard error of the best (better mean, then plan order, on ties). Within it, the seed with
/// the best validation value supplies the selected run.
pub(crate) fn select(task: crate::manifest::Task, plan: &Plan, runs: &[StoredRun], metric: &str, rule: SelectionRule) -> Result<Picked> {
    let dir = direction(task, metric).unwrap_or(Direction::Maximise);
    let configs = summarise(plan, runs, metric);
    let mut best: Option<(&ConfigSummary, f64)> = None;
    for c in configs.iter().filter(|c| !c.baseline) {
        if let Some(s) = c.validation.get(metric) {
            if best.is_none_or(|(_, b)| better(dir, s.mean, b)) {
                best = Some((c, s.mean));
            }
        }
    }
    let (best, _) = best.ok_or_else(|| {
        Error::NoUsableRun(format!(
            "no configuration finished a run with a defined validation {metric}: every run failed or diverged (see the runs' result.json)"
        ))
    })?;
    let mut chosen = best;
    if rule == SelectionRule::OneStandardError {
        for c in simpler_within_one_se(&configs, best, metric, dir) {
            let mean = |x: &ConfigSummary| x.validation.get(metric).map(|s| s.mean).unwrap_or(f64::NAN);
            if c.parameter_count < chosen.parameter_count
                || (c.parameter_count == chosen.parameter_count && better(dir, mean(c), mean(chosen)))
            {
                chosen = c;
            }
        }
    }
    let mut best_run: Option<(&StoredRun, f64)> = None;
    for r in runs.iter().filter(|r| r.record.config_id == chosen.config_id && r.record.outcome.is_completed()) {
        if let Some(v) = r.record.validation.get(metric).copied().flatten() {
            if best_run.is_none_or(|(_, b)| better(dir, v, b)) {
                best_run = Some((r, v));
            }
        }
    }
    let run_id = best_run
        .map(|(r, _)| r.record.run_id.clone())
        .ok_or_else(|| Error::NoUsableRun("the selected configuration has no usable run".into()))?;
    let (selected_config, best_config) = (chosen.config_id.clone(), best.config_id.clone());
    Ok(Picked { configs, selected_config, selected_run: run_id, best_config })
}

/// What the test evaluation is given beside the runs and the test rows.
pub(crate) struct EvaluationInputs<'a> {
    pub bootstrap: usize,
    pub bootstrap_seed: u64,
    pub group_columns: &'a [GroupColumn],
    pub validation_y: &'a Labels,
    pub decision: &'a DecisionSpec,
    pub calibration: &'a CalibrationSpec,
    /// The results layout derived for: calibration, intervals, ensembles and top-label tables
    /// from 5 on.
    pub layout_version: u32,
    /// `[selection] ensemble`: deploy the mean of the selected configuration's seeds.
    pub ensemble: bool,
}

/// What [`evaluate_test`] derived.
pub(crate) struct Evaluated {
    pub test: TestEvaluation,
    /// The selected run's deployed outputs on the test rows (calibrated when a map was fitted).
    pub outputs: Vec<f64>,
    pub calibration: Option<CalibrationReport>,
    pub interval: Option<IntervalReport>,
    pub ensemble: Option<EnsembleReport>,
}

/// One seed of the selected configuration, scored as deployed.
struct SeedScores {
    seed: u64,
    run_id: String,
    model: ScoringModel,
    map: Option<CalibrationMap>,
    /// The network's own outputs on the test rows, and the deployed ones.
    raw_outputs: Vec<f64>,
    outputs: Vec<f64>,
    /// The network's raw outputs on the validation rows, when its calibration map was fitted on
    /// them, so the deployed validation outputs do not score those rows again.
    raw_validation: Option<Vec<f32>>,
}

impl SeedScores {
    /// The deployed outputs on the validation rows `x`: through the map when there is one, with
    /// the bits of [`ScoringModel::score_calibrated`].
    fn validation_outputs(&mut self, x: &Matrix) -> Result<Vec<f64>> {
        let Some(raw) = self.raw_validation.take() else { return self.model.score_calibrated(x, self.map.as_ref()) };
        Ok(self.model.deployed_outputs(&raw, self.map.as_ref()))
    }
}

fn class_rows(labels: &Labels) -> Option<(&[usize], usize)> {
    match labels {
        Labels::Classes { rows, classes } => Some((rows, *classes)),
        Labels::Values(_) => None,
    }
}

/// Scores one run on the test rows as deployed: its map (fitted on its own validation outputs)
/// applied when `method` asks for one.
fn score_seed(run: &StoredRun, test_x: &Matrix, validation: (&Matrix, &Labels), method: CalibrationMethod) -> Result<SeedScores> {
    let mut model = ScoringModel::from_stored(run)?;
    let raw_test: Vec<f32> = model.raw(test_x);
    let raw_outputs = model.head.predictions(&raw_test, model.scaling);
    let (map, raw_validation) = match class_rows(validation.1) {
        Some((rows, classes)) if method != CalibrationMethod::None => {
            let raw_val = model.raw(validation.0);
            let wide: Vec<f64> = raw_val.iter().map(|&z| f64::from(z)).collect();
            let map = calibrate::fit(method, &wide, rows, classes).map_err(|e| Error::Usage(format!("[calibration] method: {e}")))?;
            (map, Some(raw_val))
        }
        _ => (None, None),
    };
    let outputs = if map.is_some() { model.deployed_outputs(&raw_test, map.as_ref()) } else { raw_outputs.clone() };
    Ok(SeedScores { seed: run.record.seed, run_id: run.record.run_id.clone(), model, map, raw_outputs, outputs, raw_validation })
}

/// Scores the test rows with every seed of the selected configuration as deployed (each seed
/// with its own calibration map when the manifest asks for one); bootstrap intervals for the
/// selected run, seeded by `bootstrap_seed`; the regression interval of the selected run.
///
/// `validation_x` holds the validation rows' matrix, which the calibration maps, the deployed
/// threshold and the regression interval score; it is dropped (set to `None`) once they are
/// done, before the bootstrap, which over a million test rows is the evaluation's largest
/// working set.
pub(crate) fn evaluate_test(
    runs: &[StoredRun],
    selected_config: &str,
    selected_run: &str,
    (test_x, test_y): (&Matrix, &Labels),
    validation_x: &mut Option<Matrix>,
    inputs: &EvaluationInputs,
) -> Result<Evaluated> {
    let validation_matrix = validation_x.as_ref().ok_or_else(|| Error::Internal("the validation matrix was already released".into()))?;
    let validation = (validation_matrix, inputs.validation_y);
    let current = inputs.layout_version >= CALIBRATION_FROM;
    let method = if current { inputs.calibration.method } else { CalibrationMethod::None };
    let mut per_seed: Vec<MetricSet> = Vec::new();
    let mut members: Vec<SeedScores> = Vec::new();
    for r in runs.iter().filter(|r| r.record.config_id == selected_config && r.record.outcome.is_completed()) {
        let scores = score_seed(r, test_x, validation, method)?;
        per_seed.push(scores.model.head.metrics(&scores.outputs, test_y));
        members.push(scores);
    }
    let chosen = members
        .iter()
        .position(|m| m.run_id == selected_run)
        .ok_or_else(|| Error::Internal(format!("selected run {selected_run} is not among the runs read")))?;
    let ensemble = current && inputs.ensemble && members.len() >= 2;
    let (seed, head, map) = (members[chosen].seed, members[chosen].model.head, members[chosen].map.clone());
    let deployed = |pick: fn(&SeedScores) -> &Vec<f64>| -> Vec<f64> {
        if ensemble {
            mean_outputs(&members.iter().map(|m| pick(m).as_slice()).collect::<Vec<_>>())
        } else {
            pick(&members[chosen]).clone()
        }
    };
    let (outputs, raw_outputs) = (deployed(|m| &m.outputs), deployed(|m| &m.raw_outputs));
    // The deployed model's outputs on the validation rows (each member through its own map).
    let mut validation_outputs = || -> Result<Vec<f64>> {
        let scored: Vec<Vec<f64>> = if ensemble {
            members.iter_mut().map(|m| m.validation_outputs(validation_matrix)).collect::<Result<_>>()?
        } else {
            let m = &mut members[chosen];
            return m.validation_outputs(validation_matrix);
        };
        Ok(mean_outputs(&scored.iter().map(Vec::as_slice).collect::<Vec<_>>()))
    };
    let metrics = head.metrics(&outputs, test_y);
    let k = head.values_per_row();
    let subset = |out: &[f64], idx: &[usize]| crate::training::head::rows_of(out, test_y, k, idx);
    let (bootstrap, bootstrap_seed) = (inputs.bootstrap, inputs.bootstrap_seed);
    let order = ResampleOrder::of_layout(inputs.layout_version);
    let mut groups = Vec::new();
    for g in inputs.group_columns {
        let mut levels: BTreeMap<String, Vec<usize>> = BTreeMap::new();
        for (i, l) in g.labels.iter().enumerate() {
            levels.entry(l.clone().unwrap_or_else(|| "(missing)".into())).or_default().push(i);
        }
        for (level, idx) in levels {
            let (o, y) = subset(&outputs, &idx);
            let base_rate = match &y {
                Labels::Classes { rows, classes: 2 } => Some(rows.iter().filter(|&&c| c == 1).count() as f64 / rows.len().max(1) as f64),
                Labels::Values(v) => Some(v.iter().sum::<f64>() / v.len().max(1) as f64),
                Labels::Classes { .. } => None,
            };
            // The level's rows in level order: a resample of them is the same rows as before.
            let scorer = ResampleScorer::new(head, &o, &y);
            let intervals = percentile_intervals(idx.len(), bootstrap, 0.95, bootstrap_seed, order, |within| scorer.metrics(within));
            groups.push(GroupMetrics {
                column: g.name.clone(),
                level,
                rows: idx.len(),
                base_rate,
                metrics: head.metrics(&o, &y),
                intervals,
            });
        }
    }
    let validation_y = inputs.validation_y;
    let decision = inputs.decision;
    // The deployed threshold (binary): chosen on the validation outputs, then the test rows decided.
    let decided = match (test_y, validation_y) {
        (Labels::Classes { classes: 2, .. }, Labels::Classes { rows: val_rows, .. }) => {
            let val_out = validation_outputs()?;
            let val_pos: Vec<bool> = val_rows.iter().map(|&y| y == 1).collect();
            let val_p: Vec<f64> = val_out.chunks_exact(2).map(|r| r[1]).collect();
            let point = match decision.threshold_without_data() {
                Some(t) => operating_point_at(&val_pos, &val_p, t),
                None => youden_threshold(&val_pos, &val_p),
            };
            point.map(|point| {
                let predicted: Vec<usize> = outputs.chunks_exact(2).map(|r| (r[1] >= point.threshold) as usize).collect();
                (point, predicted)
            })
        }
        _ => None,
    };
    let interval = match (test_y, validation_y) {
        (Labels::Values(test_v), Labels::Values(val_v)) if current => {
            let val_out = validation_outputs()?;
            Some(fit_interval((&val_out, val_v), (&outputs, test_v), inputs.calibration.coverage())?)
        }
        _ => None,
    };
    // The validation rows' last use was the threshold or the interval.
    *validation_x = None;
    // Every bootstrap of the whole test split (the deployed model's metrics, its decisions at the
    // threshold, the uncalibrated outputs, the single run of an ensemble) scores the same
    // resamples, each drawn once.
    let scorer = ResampleScorer::new(head, &outputs, test_y);
    let decision_scorer = |idx: &[usize]| -> MetricSet {
        match (test_y, &decided) {
            (Labels::Classes { rows, .. }, Some((_, predicted))) => {
                let (accuracy, balanced_accuracy) = decision_metrics(rows, predicted, 2, idx);
                MetricSet::from([("accuracy".to_string(), accuracy), ("balanced_accuracy".to_string(), balanced_accuracy)])
            }
            _ => MetricSet::new(),
        }
    };
    let with_calibration = map.is_some() && matches!(test_y, Labels::Classes { .. });
    let raw_scorer = with_calibration.then(|| ResampleScorer::new(head, &raw_outputs, test_y));
    let before_scorer =
        |idx: &[usize]| -> MetricSet { raw_scorer.as_ref().map(|s| s.named_metrics(idx, &CALIBRATION_METRICS)).unwrap_or_default() };
    let single_scorer = ensemble.then(|| ResampleScorer::new(head, &members[chosen].outputs, test_y));
    let single = |idx: &[usize]| single_scorer.as_ref().map(|s| s.metrics(idx)).unwrap_or_default();
    let main = |idx: &[usize]| scorer.metrics(idx);
    let mut asked: Vec<&Scorer> = vec![&main];
    if decided.is_some() && current {
        asked.push(&decision_scorer);
    }
    if with_calibration {
        asked.push(&before_scorer);
    }
    if ensemble {
        asked.push(&single);
    }
    let mut found = shared_percentile_intervals(test_y.len(), bootstrap, 0.95, bootstrap_seed, order, &asked).into_iter();
    let intervals = found.next().unwrap_or_default();
    let chosen_threshold = match (test_y, decided) {
        (Labels::Classes { rows, .. }, Some((point, predicted))) => {
            let metrics = if current { found.next().unwrap_or_default() } else { BTreeMap::new() };
            Some(ThresholdReport {
                rule: decision.threshold,
                threshold: point.threshold,
                validation_tpr: point.true_positive_rate,
                validation_fpr: point.false_positive_rate,
                confusion: confusion_matrix(rows, &predicted, 2),
                per_class: per_class(rows, &predicted, 2),
                cost_false_positive: decision.cost_false_positive.filter(|_| decision.threshold == ThresholdRule::ExpectedCost),
                cost_false_negative: decision.cost_false_negative.filter(|_| decision.threshold == ThresholdRule::ExpectedCost),
                metrics,
            })
        }
        _ => None,
    };
    let (reliability, reliability_per_class, confusion, per_class_report) = match test_y {
        Labels::Classes { rows, classes } => {
            let predicted = predicted_classes(&outputs, *classes);
            let (table, per_class_tables) = if current {
                let per_class_tables = if inputs.calibration.per_class_reliability {
                    (0..*classes).map(|c| ClassReliability { class: c, bins: class_table(rows, &outputs, *classes, c, 10) }).collect()
                } else {
                    Vec::new()
                };
                (top_label_table(rows, &outputs, *classes, 10), per_class_tables)
            } else if *classes == 2 {
                let is_pos: Vec<bool> = rows.iter().map(|&y| y == 1).collect();
                let p: Vec<f64> = outputs.chunks_exact(2).map(|r| r[1]).collect();
                (reliability_bins(&is_pos, &p, 10), Vec::new())
            } else {
                (Vec::new(), Vec::new())
            };
            (table, per_class_tables, confusion_matrix(rows, &predicted, *classes), per_class(rows, &predicted, *classes))
        }
        Labels::Values(_) => (Vec::new(), Vec::new(), Vec::new(), Vec::new()),
    };
    let calibration = match (&map, test_y) {
        (Some(map), Labels::Classes { rows, classes }) => Some(CalibrationReport {
            map: map.clone(),
            fitted_on: FITTED_ON_VALIDATION.into(),
            rows: validation_y.len(),
            before: found.next().unwrap_or_default(),
            reliability_before: top_label_table(rows, &raw_outputs, *classes, 10),
        }),
        _ => None,
    };
    let ensemble = ensemble.then(|| EnsembleReport {
        members: members.iter().map(|m| m.run_id.clone()).collect(),
        maps: members.iter().filter_map(|m| m.map.clone()).collect(),
        single_run: found.next().unwrap_or_default(),
    });
    let test = TestEvaluation {
        run_id: selected_run.to_string(),
        seed,
        rows: test_y.len(),
        metrics,
        intervals,
        across_seeds: spreads(&per_seed),
        reliability,
        reliability_per_class,
        confusion,
        per_class: per_class_report,
        groups,
        chosen_threshold,
    };
    Ok(Evaluated { test, outputs, calibration, interval, ensemble })
}

/// Working memory of one thread scoring bootstrap resamples, per scored row: a resample's rows
/// and its metrics' working copies.
pub(crate) const BOOTSTRAP_BYTES_PER_ROW: u64 = 60;

/// What is derived from the stored runs: the selection, and the selected run's outputs on the
/// test split (`test-predictions.csv`: row index and outputs only, never a feature or group
/// value), from which every later analysis can be recomputed.
pub(crate) struct Derived {
    pub selection: Selection,
    pub test_predictions: String,
    /// The deployed model's outputs on the test rows (k per row), in test-row order.
    pub test_outputs: Vec<f64>,
    /// The test rows encoded by the preprocessor, built once for every analysis after selection.
    pub test_x: Matrix,
}

/// Each named group column's label for every test row.
pub(crate) fn group_columns(names: &[String], exp: &crate::experiment::Experiment) -> Result<Vec<GroupColumn>> {
    names
        .iter()
        .map(|name| {
            let col = crate::data::source::ColumnSource::column(&exp.source, name)?;
            Ok(GroupColumn { name: name.clone(), labels: exp.splits.test.iter().map(|&r| col.label(r)).collect() })
        })
        .collect()
}

/// The selection of a configuration from the stored runs and the one evaluation of its selected
/// run on the test split: what `train` records in `selection.json` and `test-predictions.csv`, and
/// `verify` re-derives, as results layout `layout_version` records them. The validation matrix is
/// taken from `prepared` and freed once the evaluation's last use of it is done: no analysis after
/// selection reads it, and over millions of rows it would stay in memory through them.
pub(crate) fn derive(prepared: &mut Prepared, runs: &[StoredRun], layout_version: u32) -> Result<Derived> {
    if prepared.validation_x.rows != prepared.validation_y.len() {
        return Err(crate::error::Error::Internal("the validation matrix was already released by an earlier derivation".into()));
    }
    let mut validation_x = Some(std::mem::take(&mut prepared.validation_x));
    let (exp, plan, preprocessor) = (&prepared.exp, &prepared.plan, &prepared.exp.preprocessor);
    let m = &exp.manifest;
    let picked = select(m.data.task, plan, runs, &m.selection.metric, m.selection.rule)?;
    let (test_x, _) = preprocessor
        .transform_source(&exp.source, &[&exp.splits.test])?
        .pop()
        .ok_or_else(|| crate::error::Error::Internal("one row list gave no matrix".into()))?;
    let test_y = exp.labels(&exp.splits.test);
    let groups = group_columns(&exp.roles.groups, exp)?;
    let calibration = m.calibration.clone().unwrap_or_default();
    let inputs = EvaluationInputs {
        bootstrap: m.selection.bootstrap,
        bootstrap_seed: m.split.seed,
        group_columns: &groups,
        validation_y: &prepared.validation_y,
        decision: &m.decision.clone().unwrap_or_default(),
        calibration: &calibration,
        layout_version,
        ensemble: m.selection.ensemble,
    };
    let per_thread = BOOTSTRAP_BYTES_PER_ROW.saturating_mul(test_x.rows as u64);
    let evaluated = crate::threads::helper_pool(per_thread, "score bootstrap resamples")?
        .install(|| evaluate_test(runs, &picked.selected_config, &picked.selected_run, (&test_x, &test_y), &mut validation_x, &inputs))?;
    let per_row = exp.head().values_per_row();
    let test_predictions = crate::store::run::predictions_csv(&exp.splits.test, &evaluated.outputs, per_row);
    let selection = Selection {
        metric: m.selection.metric.clone(),
        higher_is_better: crate::metrics::registry::direction(m.data.task, &m.selection.metric)
            == Some(crate::metrics::registry::Direction::Maximise),
        configs: picked.configs,
        selected_config: picked.selected_config,
        selected_run: picked.selected_run,
        baseline_config: plan.configs.iter().find(|c| c.baseline).map(|c| c.id.clone()),
        rule: m.selection.rule,
        best_config: picked.best_config,
        test: evaluated.test,
        calibration: evaluated.calibration,
        interval: evaluated.interval,
        ensemble: evaluated.ensemble,
    };
    Ok(Derived { selection, test_predictions, test_outputs: evaluated.outputs, test_x })
}
