//! Gathers the figures the limitation rules read ([`Evidence`]) from a results folder's stored
//! files: the data summary, the selection and the selected run.

use serde_json::Value;

use crate::data::roles::Role;
use crate::data::summary::DataSummary;
use crate::experiment::plan::{config_label, PlannedConfig};
use crate::experiment::ExperimentRecord;
use crate::manifest::{Manifest, SelectionRule, Task};
use crate::metrics::registry::{self, direction, Direction, Scale};
use crate::selection::{simpler_within_one_se, Selection};

/// The figures the rules read, gathered once from the stored results by [`gather`].
/// One class of the target: its label, rows in the whole table and share of them.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ClassShare {
    pub label: String,
    pub rows: usize,
    pub share: f64,
}

/// One validation metric of the selected network and of the linear baseline: (mean, sd) across
/// seeds each.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct MetricPair {
    pub metric: String,
    pub higher_is_better: bool,
    pub network: (f64, f64),
    pub baseline: (f64, f64),
}

#[derive(Debug, Clone, Default)]
pub(crate) struct Evidence {
    pub classification: bool,
    pub train_rows: usize,
    pub parameter_count: usize,
    /// Every class of a classifier's target with its rows in the whole table and share.
    pub classes: Vec<ClassShare>,
    pub metric: String,
    pub higher_is_better: bool,
    /// The scale the selection metric's spread and gap are judged against, and what it is: 1 for
    /// metrics bounded in [0, 1], the class-prior log loss for log loss, the target's standard
    /// deviation for RMSE and MAE.
    pub scale: (f64, String),
    /// Mean and standard deviation across seeds of the selected configuration's validation metric.
    pub selected: Option<(f64, f64)>,
    /// The same for the linear baseline.
    pub baseline: Option<(f64, f64)>,
    /// Every other card metric with both validation spreads.
    pub baseline_other_metrics: Vec<MetricPair>,
    /// Classifiers: classes with test rows that the deployed decision never gives on the test
    /// split, with their test rows.
    pub never_predicted: Vec<(String, usize)>,
    /// Train minus validation of the selection metric, oriented so positive means "train better".
    pub gap: Option<f64>,
    pub test_ece: Option<f64>,
    /// The lower bound of its 95% bootstrap interval (none without resamples).
    pub test_ece_lower: Option<f64>,
    /// Regression with a prediction interval: (declared coverage, test coverage, the upper end
    /// of its 95% Wilson interval, covered rows, test rows).
    pub interval_coverage: Option<(f64, f64, f64, usize, usize)>,
    /// The disparity analysis (`fairness.json`), when the folder has one.
    pub fairness: Option<crate::analysis::fairness::FairnessReport>,
    /// Permutation importance (`importance.json`), when the folder has one.
    pub importance: Option<crate::analysis::importance::ImportanceReport>,
    /// The sensitivity analysis (`sensitivity.json`), when the folder has one.
    pub sensitivity: Option<crate::analysis::sensitivity::SensitivityReport>,
    /// Features the manifest lists as not to be used for decisions (`[analysis] sensitive`).
    pub sensitive: Vec<String>,
    /// The test metric that says whether the model beats chance (ROC AUC, or R² for regression):
    /// (name, value, interval lower, interval upper, the value chance gives).
    pub chance: Option<(String, f64, f64, f64, f64)>,
    pub test_rows: usize,
    /// Classifiers: (label, test rows) of the class with the fewest test rows.
    pub test_smallest_class: Option<(String, usize)>,
    /// Test metrics whose 95% bootstrap interval has zero width.
    pub degenerate_intervals: Vec<String>,
    /// (feature, missing share) of every feature.
    pub missing: Vec<(String, f64)>,
    /// (feature, number of levels with fewer than RARE_LEVEL_ROWS rows) for categorical features.
    pub rare_levels: Vec<(String, usize)>,
    /// (grid key, selected value, its position, number of distinct ordered values searched).
    pub grid: Vec<(String, String, usize, usize)>,
    /// Configurations with fewer parameters than the selected one whose validation mean is
    /// within one standard error of it: (label, parameters, mean). Empty under the
    /// one-standard-error rule, which already picks the smallest of them.
    pub simpler_within_noise: Vec<(String, usize, f64)>,
    /// (test, validation) rows identical to a training row.
    pub duplicated_into_evaluation: (usize, usize),
    pub constant_on_training: Vec<String>,
    /// Features with one value on every row of the table (nulls aside).
    pub constant_everywhere: Vec<String>,
    /// (column, values crossing splits, distinct values, evaluation rows sharing a training value).
    pub crossing_keys: Vec<(String, usize, usize, usize)>,
    pub failed_runs: usize,
}

/// Ordering position of a grid value: numbers by value, lists (widths) by their sum, booleans
/// false < true; `None` for values with no natural order.
fn order_key(v: &Value) -> Option<f64> {
    match v {
        Value::Number(n) => n.as_f64(),
        Value::Bool(b) => Some(*b as u8 as f64),
        Value::Array(items) => Some(items.iter().filter_map(Value::as_f64).sum()),
        _ => None,
    }
}

/// (key, selected value, its position, distinct ordered values) of every ordered grid key.
fn grid_positions(manifest: &Manifest, selected: &PlannedConfig) -> Vec<(String, String, usize, usize)> {
    manifest
        .sweep
        .grid
        .iter()
        .filter_map(|(k, values)| {
            let chosen = selected.overrides.get(k)?;
            let mut keys: Vec<f64> = values.iter().map(order_key).collect::<Option<Vec<_>>>()?;
            let mine = order_key(chosen)?;
            keys.sort_by(f64::total_cmp);
            keys.dedup();
            let position = keys.iter().position(|x| *x == mine)?;
            Some((k.clone(), chosen.to_string(), position, keys.len()))
        })
        .collect()
}

/// The scale a metric's seed spread and train-validation gap are judged against, and its name.
pub(crate) fn metric_scale(task: Task, metric: &str, summary: &DataSummary) -> (f64, String) {
    match registry::find(task, metric).map(|m| m.scale) {
        Some(Scale::ClassPriorLogLoss) => {
            let total: usize = summary.target.classes.iter().map(|c| c.count).sum();
            let prior: f64 =
                summary.target.classes.iter().map(|c| c.count as f64 / total.max(1) as f64).filter(|&p| p > 0.0).map(|p| -p * p.ln()).sum();
            (prior, "the log loss of predicting the class shares".into())
        }
        Some(Scale::TargetSd) => {
            (summary.target.distribution.as_ref().map(|d| d.std).unwrap_or(1.0), "the target's standard deviation".into())
        }
        Some(Scale::Unit) | None => (1.0, "the metric's range [0, 1]".into()),
    }
}

pub(crate) fn gather(
    manifest: &Manifest,
    record: &ExperimentRecord,
    summary: &DataSummary,
    selection: &Selection,
    selected: &PlannedConfig,
    parameter_count: usize,
) -> Evidence {
    let m = &selection.metric;
    let task = manifest.data.task;
    let dir = direction(task, m).unwrap_or(Direction::Maximise);
    let higher = dir == Direction::Maximise;
    let selected_summary = selection.selected_summary();
    let baseline_summary = selection.configs.iter().find(|c| c.baseline);
    let t = &selection.test;
    let chance_metric = if task == Task::Regression { ("r2", 0.0) } else { ("roc_auc", 0.5) };
    let chance = t.metrics.get(chance_metric.0).copied().flatten().map(|v| {
        let (lower, upper) = t.intervals.get(chance_metric.0).map(|i| (i.lower, i.upper)).unwrap_or((v, v));
        (chance_metric.0.to_string(), v, lower, upper, chance_metric.1)
    });
    let test_smallest_class = t
        .confusion
        .iter()
        .enumerate()
        .map(|(c, row)| (record.class_labels.get(c).cloned().unwrap_or_default(), row.iter().sum::<usize>()))
        .min_by_key(|(_, n)| *n);
    let baseline_other_metrics = match (selected_summary, baseline_summary) {
        (Some(net), Some(base)) => registry::table(task)
            .iter()
            .filter(|metric| metric.on_card && metric.name != m.as_str())
            .filter_map(|metric| {
                let (n, b) = (net.validation.get(metric.name)?, base.validation.get(metric.name)?);
                Some(MetricPair {
                    metric: metric.name.to_string(),
                    higher_is_better: metric.direction == Direction::Maximise,
                    network: (n.mean, n.sd),
                    baseline: (b.mean, b.sd),
                })
            })
            .collect(),
        _ => Vec::new(),
    };
    // The decision as deployed: a binary model's at its threshold (when the folder records one),
    // otherwise the most probable class.
    let deployed_confusion = match (task, &t.chosen_threshold) {
        (Task::Binary, Some(report)) if !report.confusion.is_empty() => &report.confusion,
        _ => &t.confusion,
    };
    let never_predicted = (0..deployed_confusion.len())
        .filter_map(|c| {
            let rows: usize = deployed_confusion[c].iter().sum();
            let predicted: usize = deployed_confusion.iter().map(|row| row.get(c).copied().unwrap_or(0)).sum();
            (rows > 0 && predicted == 0).then(|| (record.class_labels.get(c).cloned().unwrap_or_default(), rows))
        })
        .collect();
    let simpler_within_noise = match (selection.rule, selected_summary) {
        (SelectionRule::Best, Some(chosen)) => simpler_within_one_se(&selection.configs, chosen, m, dir)
            .into_iter()
            .filter_map(|c| Some((config_label(&c.overrides, false), c.parameter_count, c.validation.get(m)?.mean)))
            .collect(),
        _ => Vec::new(),
    };
    let checks = summary.split_checks.clone().unwrap_or_default();
    Evidence {
        classification: task != Task::Regression,
        train_rows: record.split_rows[0],
        parameter_count,
        classes: summary
            .target
            .classes
            .iter()
            .map(|c| ClassShare { label: c.level.clone(), rows: c.count, share: c.count as f64 / summary.rows.max(1) as f64 })
            .collect(),
        metric: m.clone(),
        higher_is_better: higher,
        scale: metric_scale(task, m, summary),
        selected: selected_summary.and_then(|s| s.validation.get(m)).map(|s| (s.mean, s.sd)),
        baseline: baseline_summary.and_then(|s| s.validation.get(m)).map(|s| (s.mean, s.sd)),
        baseline_other_metrics,
        never_predicted,
        gap: selected_summary.and_then(|s| s.gap.as_ref()).map(|g| selection.worse_on_validation(g.mean)),
        test_ece: t.metrics.get("ece").copied().flatten(),
        test_ece_lower: t.intervals.get("ece").map(|i| i.lower),
        fairness: None,
        importance: None,
        sensitivity: None,
        sensitive: manifest.analysis.as_ref().map(|a| a.sensitive.clone()).unwrap_or_default(),
        interval_coverage: selection
            .interval
            .as_ref()
            .map(|i| (i.coverage, i.test_coverage, i.test_coverage_interval.1, i.test_covered, i.test_rows)),
        chance,
        test_rows: t.rows,
        test_smallest_class,
        degenerate_intervals: t.intervals.iter().filter(|(_, i)| i.upper == i.lower).map(|(k, _)| k.clone()).collect(),
        missing: summary.columns.iter().filter(|c| c.role == Role::Feature).map(|c| (c.name.clone(), c.missing_share)).collect(),
        rare_levels: summary
            .columns
            .iter()
            .filter(|c| c.role == Role::Feature && c.categorical)
            .map(|c| (c.name.clone(), c.rare_levels))
            .collect(),
        grid: grid_positions(manifest, selected),
        simpler_within_noise,
        duplicated_into_evaluation: (checks.test_rows_duplicating_training, checks.validation_rows_duplicating_training),
        constant_on_training: checks.constant_on_training.iter().filter(|name| !constant_in_table(summary, name)).cloned().collect(),
        constant_everywhere: checks.constant_on_training.iter().filter(|name| constant_in_table(summary, name)).cloned().collect(),
        crossing_keys: checks.repeated_keys.iter().map(|k| (k.column.clone(), k.crossing, k.values, k.evaluation_rows_sharing)).collect(),
        failed_runs: selection.configs.iter().map(|c| c.runs_failed).sum(),
    }
}

/// Whether the data summary counts at most one distinct value in the column `name`.
fn constant_in_table(summary: &DataSummary, name: &str) -> bool {
    summary.columns.iter().find(|c| c.name == name).is_some_and(|c| c.distinct <= 1)
}
