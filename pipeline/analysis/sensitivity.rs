//! `sensitivity.json` (layout 6): what moves the deployed model's output, stored as evidence and
//! re-derived by `verify`: the reference rows principal reasons are measured from
//! (`reference.rs`), the sensitivity table (`shifts.rs`), and integrated gradients of every test
//! row from the training median row (`attribution.rs`): how often each feature is among a row's
//! principal reasons, its mean contribution's size, and the worst completeness gap met.

use serde::{Deserialize, Serialize};

use super::attribution::{row_tolerance, RELATIVE_TOLERANCE};
use super::reasons::{principal, Toward, DEFAULT_REASONS};
use super::reference::{indicator_inputs, median_row, threshold_row, References};
use super::shifts::FeatureShifts;
use crate::error::Result;
use crate::manifest::Task;
use crate::selection::serving::Deployed;

/// The first results layout with `sensitivity.json`.
pub(crate) const SENSITIVITY_FROM: u32 = 6;

/// One feature's integrated gradients over the test rows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct FeatureAttribution {
    pub feature: String,
    /// Mean |contribution| over the test rows, in the explained output's units.
    pub mean_size: f64,
    /// Share of test rows that give the feature as one of their principal reasons.
    pub reason_share: f64,
}

/// Integrated gradients of the test rows from the median reference.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct TestAttributions {
    /// What the contributions explain: `log-odds` or `prediction` (target units).
    pub explains: String,
    pub steps: usize,
    /// A row's tolerance: the larger of this and `relative_tolerance` times its move.
    pub tolerance: f64,
    pub relative_tolerance: f64,
    /// Largest |sum of a row's contributions - (f(x) - f(reference))| over the test rows.
    pub worst_gap: f64,
    /// Largest estimated error of one feature's contribution over the test rows.
    pub worst_estimate: f64,
    /// Rows integrated again with more steps to meet the tolerance, and rows that still miss it.
    pub refined_rows: usize,
    pub rows_over_tolerance: usize,
    /// Reasons per row counted in `reason_share`.
    pub reasons: usize,
    pub toward: String,
    /// Largest mean size first.
    pub features: Vec<FeatureAttribution>,
}

/// `sensitivity.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct SensitivityReport {
    pub references: References,
    /// The unit of a regression model's changes: the training target's standard deviation.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub target_std: Option<f64>,
    pub shifts: Vec<FeatureShifts>,
    pub attributions: TestAttributions,
    /// Partial dependence and ICE curves of the most important features.
    pub curves: Vec<super::curves::Curve>,
    /// How many test rows the table, the attributions and the curves were computed on, when a
    /// sample of them (`analysis/sample.rs`).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub sampled_rows: Option<usize>,
}

/// The explained class of each row: the most probable under `outputs` (multiclass), else 0.
pub(crate) fn explained_classes(task: Task, outputs: &[f64], k: usize) -> Vec<usize> {
    match task {
        Task::Multiclass => outputs.chunks_exact(k).map(crate::metrics::classification::argmax).collect(),
        _ => vec![0; outputs.len() / k.max(1)],
    }
}

/// The analysis of a derived selection, as `train` stores it and `verify` re-derives it; its
/// scoring and the reference rows' order statistics run on every core a helper pool may take.
pub(crate) fn derive(
    prepared: &crate::experiment::prepared::Prepared,
    derived: &crate::selection::Derived,
    runs: &[crate::store::run::StoredRun],
    importance: Option<&super::importance::ImportanceReport>,
    layout_version: u32,
) -> Result<SensitivityReport> {
    crate::threads::helper_pool(super::SCORING_BYTES_PER_THREAD, "score the sensitivity rows")?
        .install(|| derive_here(prepared, derived, runs, importance, layout_version))
}

fn derive_here(
    prepared: &crate::experiment::prepared::Prepared,
    derived: &crate::selection::Derived,
    runs: &[crate::store::run::StoredRun],
    importance: Option<&super::importance::ImportanceReport>,
    layout_version: u32,
) -> Result<SensitivityReport> {
    let exp = &prepared.exp;
    let m = &exp.manifest;
    let task = m.data.task;
    let analysis = m.analysis.clone().unwrap_or_default();
    let test = &exp.splits.test;
    let positions = super::sample::positions(test.len(), m.split.seed, layout_version);
    let analysed = super::sample::rows(test, &positions);
    let train_x = &prepared.train_x;
    let test_x = derived.test_x.rows_at(&positions);
    let mut model = Deployed::load(&derived.selection, runs)?;
    let k = model.head().values_per_row();
    let inputs = &exp.preprocessor.inputs;
    let median = median_row(train_x, &indicator_inputs(inputs));
    let reference_positions = super::sample::reference_positions(train_x.rows, m.split.seed, layout_version);
    let threshold = match task {
        Task::Binary => {
            let t = derived.selection.deployed_threshold(crate::store::FORMAT_VERSION).value;
            let sampled = reference_positions.as_ref().map(|p| train_x.rows_at(p));
            let from = sampled.as_ref().unwrap_or(train_x);
            let scores: Vec<f64> = model.score(from)?.chunks_exact(k).map(|r| r[1]).collect();
            Some(threshold_row(from, &scores, t, analysis.reference_rows()))
        }
        _ => None,
    };
    let threshold_sampled_rows = threshold.as_ref().and(reference_positions.as_ref()).map(Vec::len);
    let outputs: Vec<f64> = positions.iter().flat_map(|&p| derived.test_outputs[p * k..(p + 1) * k].iter().copied()).collect();
    let classes = explained_classes(task, &outputs, k);
    let shifts = super::shifts::table(&mut model, task, inputs, &test_x, &classes)?;
    let steps = analysis.integration_steps();
    let widths: Vec<usize> = inputs.iter().map(|e| e.width()).collect();
    let attr = super::attribution::deployed(&mut model, &test_x, &median, &classes, &widths, steps)?;
    let per_feature = attr.per_feature(&widths);
    let labels: &[String] = match &exp.target {
        crate::data::roles::Target::Classes { labels, .. } => labels,
        crate::data::roles::Target::Values(_) => &[],
    };
    let favourable = m.decision.as_ref().and_then(|d| d.favourable.as_ref());
    let toward = Toward::of(task, labels, favourable);
    let rows = per_feature.len().max(1) as f64;
    // Rows giving each feature among their principal reasons: each row's reasons found once.
    let mut reason_rows = vec![0usize; inputs.len()];
    for row in &per_feature {
        for (f, _) in principal(row, toward, DEFAULT_REASONS) {
            reason_rows[f] += 1;
        }
    }
    let mut features: Vec<FeatureAttribution> = inputs
        .iter()
        .zip(&reason_rows)
        .enumerate()
        .map(|(f, (e, &reasons))| FeatureAttribution {
            feature: e.name().to_string(),
            mean_size: per_feature.iter().map(|r| r[f].abs()).sum::<f64>() / rows,
            reason_share: reasons as f64 / rows,
        })
        .collect();
    features.sort_by(|a, b| b.mean_size.total_cmp(&a.mean_size));
    let tolerance = super::attribution::Explained::of(&model.head(), model.target_std()).tolerance();
    let attributions = TestAttributions {
        explains: if task == Task::Regression { "prediction".into() } else { "log-odds".into() },
        steps,
        tolerance,
        relative_tolerance: RELATIVE_TOLERANCE,
        worst_gap: attr.gap.iter().copied().fold(0.0, f64::max),
        refined_rows: attr.steps.iter().filter(|&&s| s > steps).count(),
        rows_over_tolerance: (0..attr.gap.len())
            .filter(|&r| attr.gap[r].max(attr.estimate[r]) > row_tolerance(tolerance, attr.difference[r]))
            .count(),
        worst_estimate: attr.estimate.iter().copied().fold(0.0, f64::max),
        reasons: DEFAULT_REASONS,
        toward: toward.describe(task, labels, favourable),
        features,
    };
    // Curves for the most important features (permutation importance's order; input order when
    // there is none).
    let ranked: Vec<usize> = match importance {
        Some(r) => r.features.iter().filter_map(|f| inputs.iter().position(|e| e.name() == f.feature)).collect(),
        None => (0..inputs.len()).collect(),
    };
    let chosen: Vec<usize> = ranked.into_iter().take(analysis.curve_features()).collect();
    let training_column = |name: &str| -> Result<super::curves::TrainingColumn> {
        let col = crate::data::source::ColumnSource::column(&exp.source, name)?;
        let numeric = inputs.iter().any(|e| e.name() == name && matches!(e, crate::data::prep::InputEncoding::Numeric { .. }));
        Ok(if numeric {
            super::curves::TrainingColumn::Values(exp.splits.train.iter().filter_map(|&r| col.number(r)).collect())
        } else {
            super::curves::TrainingColumn::Labels(exp.splits.train.iter().map(|&r| col.label(r)).collect())
        })
    };
    let curves = super::curves::curves(&mut model, task, inputs, &test_x, &chosen, &training_column)?;
    Ok(SensitivityReport {
        curves,
        references: References { median, threshold, threshold_sampled_rows },
        target_std: if task == Task::Regression { model.target_std() } else { None },
        shifts,
        attributions,
        sampled_rows: (analysed.len() < test.len()).then_some(analysed.len()),
    })
}
