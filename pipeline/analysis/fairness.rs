//! Whom the deployed decision fails: per group of every `group_columns` column (and each declared
//! intersection of two), on the test split, the rows, base rate, selection rate (the share that
//! receives the favourable outcome), adverse impact ratio against the most favoured group (US
//! Uniform Guidelines on Employee Selection Procedures, 29 CFR 1607.4(D), 1978), true- and
//! false-positive rate gaps (equal opportunity and equalized odds; Hardt, Price & Srebro,
//! NeurIPS 2016) and the group's expected calibration error; for regression, the mean residual and
//! RMSE. Intervals are percentile intervals of a bootstrap that resamples rows within each group
//! (the groups' sizes fixed), from one seeded stream.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;

pub(crate) use super::estimate::Estimate;
use crate::error::Result;
use crate::manifest::{FairnessSpec, Task};
use crate::metrics::bootstrap::quantile_sorted;
use crate::metrics::calibration::{ece_from_table, top_label_table};
use crate::rng::{Purpose, Stream};
use crate::selection::GroupColumn;
use crate::training::Labels;

/// One group's figures at the deployed decision.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct GroupFigures {
    pub level: String,
    pub rows: usize,
    /// At least the stated minimum of rows: the rules judge it.
    pub judged: bool,
    /// Binary: share of positive rows; regression: the mean target.
    pub base_rate: f64,
    /// Binary: [[true negatives, false positives], [false negatives, true positives]] at the
    /// deployed threshold.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub confusion: Option<[[usize; 2]; 2]>,
    #[serde(default, skip_serializing_if = "BTreeMap::is_empty")]
    pub figures: BTreeMap<String, Estimate>,
}

/// One group column (or intersection) analysed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct GroupDisparity {
    /// The column's name, or `a & b` for an intersection.
    pub column: String,
    /// The judged group with the highest selection rate, which the ratios and gaps compare with.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub reference: Option<String>,
    pub groups: Vec<GroupFigures>,
}

/// The disparity analysis of one experiment.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct FairnessReport {
    /// Binary: the threshold the decision is taken at (positive when the probability of the
    /// positive class is at least it) and the outcome favourable to the person, when declared.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threshold: Option<f64>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub favourable: Option<String>,
    /// Whether the favourable outcome is the positive class's (else the negative class's).
    pub favourable_is_positive: bool,
    pub minimum_group_rows: usize,
    pub rate_gap: f64,
    pub resamples: usize,
    pub columns: Vec<GroupDisparity>,
    /// `[fairness] proxy_check`: a linear probe's test ROC AUC for each group column.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub proxies: Vec<super::proxy::ProxyCheck>,
}

/// Figure names, as stored.
pub(crate) const SELECTION_RATE: &str = "selection_rate";
pub(crate) const ADVERSE_IMPACT_RATIO: &str = "adverse_impact_ratio";
pub(crate) const TRUE_POSITIVE_RATE: &str = "true_positive_rate";
pub(crate) const FALSE_POSITIVE_RATE: &str = "false_positive_rate";
pub(crate) const TPR_GAP: &str = "true_positive_rate_gap";
pub(crate) const FPR_GAP: &str = "false_positive_rate_gap";
pub(crate) const ECE: &str = "ece";
pub(crate) const MEAN_RESIDUAL: &str = "mean_residual";
pub(crate) const RMSE: &str = "rmse";

/// The decision as the analysis sees it.
pub(crate) struct Decision {
    pub threshold: f64,
    pub favourable: Option<String>,
    pub favourable_is_positive: bool,
}

/// Each group's rows (indices into the test rows), in level order; null labels are "(missing)".
fn levels(labels: &[Option<String>]) -> Vec<(String, Vec<usize>)> {
    let mut by: BTreeMap<String, Vec<usize>> = BTreeMap::new();
    for (i, l) in labels.iter().enumerate() {
        by.entry(l.clone().unwrap_or_else(|| "(missing)".into())).or_default().push(i);
    }
    by.into_iter().collect()
}

/// Per-group raw figures of one sample of rows (`rows` are indices into the test rows).
fn binary_figures(rows: &[usize], y: &[usize], probs: &[f64], d: &Decision) -> (Figures, [[usize; 2]; 2]) {
    let mut c = [[0usize; 2]; 2];
    for &i in rows {
        let decided = (probs[2 * i + 1] >= d.threshold) as usize;
        c[y[i]][decided] += 1;
    }
    let n = rows.len() as f64;
    let positive_decisions = (c[0][1] + c[1][1]) as f64;
    let favourable = if d.favourable_is_positive { positive_decisions } else { n - positive_decisions };
    let mut out = BTreeMap::new();
    if n > 0.0 {
        out.insert(SELECTION_RATE, favourable / n);
    }
    let (positives, negatives) = (c[1][0] + c[1][1], c[0][0] + c[0][1]);
    if positives > 0 {
        out.insert(TRUE_POSITIVE_RATE, c[1][1] as f64 / positives as f64);
    }
    if negatives > 0 {
        out.insert(FALSE_POSITIVE_RATE, c[0][1] as f64 / negatives as f64);
    }
    if !rows.is_empty() {
        let sub_y: Vec<usize> = rows.iter().map(|&i| y[i]).collect();
        let sub_p: Vec<f64> = rows.iter().flat_map(|&i| [probs[2 * i], probs[2 * i + 1]]).collect();
        out.insert(ECE, ece_from_table(&top_label_table(&sub_y, &sub_p, 2, 10), rows.len()));
    }
    (out, c)
}

fn regression_figures(rows: &[usize], y: &[f64], predicted: &[f64]) -> Figures {
    let mut out = BTreeMap::new();
    if rows.is_empty() {
        return out;
    }
    let n = rows.len() as f64;
    let residuals: Vec<f64> = rows.iter().map(|&i| y[i] - predicted[i]).collect();
    out.insert(MEAN_RESIDUAL, residuals.iter().sum::<f64>() / n);
    out.insert(RMSE, (residuals.iter().map(|r| r * r).sum::<f64>() / n).sqrt());
    out
}

/// Adds the ratio and gaps against the reference group's figures.
fn compare(figures: &mut Figures, reference: &Figures) {
    if let (Some(s), Some(r)) = (figures.get(SELECTION_RATE).copied(), reference.get(SELECTION_RATE).copied()) {
        if r > 0.0 {
            figures.insert(ADVERSE_IMPACT_RATIO, s / r);
        }
    }
    for (rate, gap) in [(TRUE_POSITIVE_RATE, TPR_GAP), (FALSE_POSITIVE_RATE, FPR_GAP)] {
        if let (Some(a), Some(b)) = (figures.get(rate).copied(), reference.get(rate).copied()) {
            figures.insert(gap, a - b);
        }
    }
}

/// A group's raw figures by name.
type Figures = BTreeMap<&'static str, f64>;
/// A group's figures and, for binary models, its confusion matrix.
type Point = (Figures, Option<[[usize; 2]; 2]>);

/// What every grouping is analysed against.
struct Context<'a> {
    test_y: &'a Labels,
    outputs: &'a [f64],
    decision: Option<&'a Decision>,
    spec: &'a FairnessSpec,
    resamples: usize,
}

/// Analyses one grouping of the test rows.
fn analyse_column(column: String, labels: &[Option<String>], cx: &Context, stream: &mut Stream) -> GroupDisparity {
    let (test_y, outputs, decision, spec, resamples) = (cx.test_y, cx.outputs, cx.decision, cx.spec, cx.resamples);
    let groups = levels(labels);
    let point = |rows: &[usize]| -> Point {
        match (test_y, decision) {
            (Labels::Classes { rows: y, classes: 2 }, Some(d)) => {
                let (f, c) = binary_figures(rows, y, outputs, d);
                (f, Some(c))
            }
            (Labels::Values(y), _) => (regression_figures(rows, y, outputs), None),
            _ => (BTreeMap::new(), None),
        }
    };
    let judged: Vec<bool> = groups.iter().map(|(_, rows)| rows.len() >= spec.minimum_group_rows).collect();
    let mut estimates: Vec<Point> = groups.iter().map(|(_, rows)| point(rows)).collect();
    // The most favoured judged group: the highest selection rate, the first in level order on ties.
    let reference = (0..groups.len())
        .filter(|&g| judged[g])
        .filter_map(|g| estimates[g].0.get(SELECTION_RATE).map(|&s| (g, s)))
        .fold(None, |best: Option<(usize, f64)>, (g, s)| if best.is_none_or(|(_, b)| s > b) { Some((g, s)) } else { best });
    if let Some((r, _)) = reference {
        let reference_figures = estimates[r].0.clone();
        for e in estimates.iter_mut() {
            compare(&mut e.0, &reference_figures);
        }
    }
    // Resample within every group at once (each group's size fixed), in group order from one stream.
    let mut samples: Vec<BTreeMap<&'static str, Vec<f64>>> = vec![BTreeMap::new(); groups.len()];
    for _ in 0..resamples {
        let mut drawn: Vec<Figures> = groups
            .iter()
            .map(|(_, rows)| {
                let pick: Vec<usize> = (0..rows.len()).map(|_| rows[stream.below(rows.len() as u64) as usize]).collect();
                point(&pick).0
            })
            .collect();
        if let Some((r, _)) = reference {
            let reference_figures = drawn[r].clone();
            for d in drawn.iter_mut() {
                compare(d, &reference_figures);
            }
        }
        for (g, d) in drawn.into_iter().enumerate() {
            for (name, v) in d {
                samples[g].entry(name).or_default().push(v);
            }
        }
    }
    let groups = groups
        .iter()
        .zip(estimates)
        .zip(samples)
        .zip(judged)
        .map(|((((level, rows), (values, confusion)), mut drawn), judged)| {
            let base_rate = match test_y {
                Labels::Classes { rows: y, .. } => rows.iter().filter(|&&i| y[i] == 1).count() as f64 / rows.len().max(1) as f64,
                Labels::Values(y) => rows.iter().map(|&i| y[i]).sum::<f64>() / rows.len().max(1) as f64,
            };
            let figures = values
                .into_iter()
                .map(|(name, value)| {
                    let (lower, upper) = match drawn.get_mut(name) {
                        Some(v) if !v.is_empty() => {
                            v.sort_by(f64::total_cmp);
                            (quantile_sorted(v, 0.025), quantile_sorted(v, 0.975))
                        }
                        _ => (value, value),
                    };
                    (name.to_string(), Estimate { value, lower, upper })
                })
                .collect();
            GroupFigures { level: level.clone(), rows: rows.len(), judged, base_rate, confusion, figures }
        })
        .collect();
    GroupDisparity { column, reference: reference.map(|(r, _)| levels(labels)[r].0.clone()), groups }
}

/// The analysis over every group column and declared intersection; `None` without group
/// columns or for a multiclass model (not analysed yet).
#[allow(clippy::too_many_arguments)]
pub(crate) fn analyse(
    task: Task,
    group_columns: &[GroupColumn],
    test_y: &Labels,
    outputs: &[f64],
    decision: Option<Decision>,
    spec: &FairnessSpec,
    resamples: usize,
    seed: u64,
) -> Option<FairnessReport> {
    if group_columns.is_empty() || task == Task::Multiclass {
        return None;
    }
    let mut stream = Stream::new(seed, Purpose::GroupBootstrap);
    let cx = Context { test_y, outputs, decision: decision.as_ref(), spec, resamples };
    let mut columns = Vec::new();
    for g in group_columns {
        columns.push(analyse_column(g.name.clone(), &g.labels, &cx, &mut stream));
    }
    for pair in &spec.intersections {
        let (Some(a), Some(b)) = (group_columns.iter().find(|g| g.name == pair[0]), group_columns.iter().find(|g| g.name == pair[1]))
        else {
            continue;
        };
        let labels: Vec<Option<String>> = a
            .labels
            .iter()
            .zip(&b.labels)
            .map(|(x, y)| Some(format!("{} & {}", x.as_deref().unwrap_or("(missing)"), y.as_deref().unwrap_or("(missing)"))))
            .collect();
        columns.push(analyse_column(format!("{} & {}", a.name, b.name), &labels, &cx, &mut stream));
    }
    Some(FairnessReport {
        threshold: decision.as_ref().map(|d| d.threshold),
        favourable: decision.as_ref().and_then(|d| d.favourable.clone()),
        favourable_is_positive: decision.as_ref().is_none_or(|d| d.favourable_is_positive),
        minimum_group_rows: spec.minimum_group_rows,
        rate_gap: spec.rate_gap,
        resamples,
        columns,
        proxies: Vec::new(),
    })
}

/// The analysis of a derived selection, as `train` stores it in `fairness.json` and `verify`
/// re-derives it (layout 5 on).
pub(crate) fn derive(
    prepared: &crate::experiment::prepared::Prepared,
    derived: &crate::selection::Derived,
) -> Result<Option<FairnessReport>> {
    let exp = &prepared.exp;
    let m = &exp.manifest;
    let groups = crate::selection::group_columns(&exp.roles.groups, exp)?;
    let test_y = exp.labels(&exp.splits.test);
    // The class labels straight from the target (the experiment record would hash the splits).
    let labels: &[String] = match &exp.target {
        crate::data::roles::Target::Classes { labels, .. } => labels,
        crate::data::roles::Target::Values(_) => &[],
    };
    let decision = match m.data.task {
        Task::Binary => {
            let threshold = derived.selection.deployed_threshold(crate::store::FORMAT_VERSION).value;
            let favourable = m.decision.as_ref().and_then(|d| d.favourable.clone());
            let favourable_is_positive = favourable.as_ref().is_none_or(|f| labels.get(1) == Some(f));
            Some(Decision { threshold, favourable, favourable_is_positive })
        }
        _ => None,
    };
    let spec = m.fairness.clone().unwrap_or_default();
    let mut report = analyse(m.data.task, &groups, &test_y, &derived.test_outputs, decision, &spec, m.selection.bootstrap, m.split.seed);
    if let Some(report) = report.as_mut().filter(|_| spec.proxy_check) {
        let (train_x, test_x) = (&prepared.train_x, &derived.test_x);
        for name in &exp.roles.groups {
            let col = crate::data::source::ColumnSource::column(&exp.source, name)?;
            let label =
                |rows: &[usize]| -> Vec<String> { rows.iter().map(|&r| col.label(r).unwrap_or_else(|| "(missing)".into())).collect() };
            report.proxies.push(super::proxy::check(
                name,
                (train_x, &label(&exp.splits.train)),
                (test_x, &label(&exp.splits.test)),
                m.selection.bootstrap,
                m.split.seed,
            ));
        }
    }
    Ok(report)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_uniform_guidelines_arithmetic_gives_one_half() {
        // 29 CFR 1607.4(D): a selection rate of 30% against 60% is a ratio of 0.5, below 4/5.
        let mut y = Vec::new();
        let mut probs = Vec::new();
        let mut labels = Vec::new();
        for (group, selected) in [("a", 30), ("b", 60)] {
            for i in 0..100 {
                y.push(0);
                let p = if i < selected { 0.9 } else { 0.1 };
                probs.extend([1.0 - p, p]);
                labels.push(Some(group.to_string()));
            }
        }
        let report = analyse(
            Task::Binary,
            &[GroupColumn { name: "g".into(), labels }],
            &Labels::Classes { rows: y, classes: 2 },
            &probs,
            Some(Decision { threshold: 0.5, favourable: Some("yes".into()), favourable_is_positive: true }),
            &FairnessSpec::default(),
            0,
            1,
        )
        .unwrap();
        let g = &report.columns[0];
        assert_eq!(g.reference.as_deref(), Some("b"));
        assert_eq!(g.groups[0].figures[ADVERSE_IMPACT_RATIO].value, 0.5);
        assert_eq!(g.groups[0].figures[SELECTION_RATE].value, 0.3);
    }

    #[test]
    fn an_intersection_is_analysed_as_groups_of_its_own() {
        let (mut y, mut probs, mut a, mut b) = (Vec::new(), Vec::new(), Vec::new(), Vec::new());
        for i in 0..400 {
            y.push(i % 3 == 0);
            let p = if i % 4 == 0 { 0.8 } else { 0.2 };
            probs.extend([1.0 - p, p]);
            a.push(Some(if i % 2 == 0 { "x" } else { "y" }.to_string()));
            b.push(if i % 5 == 0 { None } else { Some("u".to_string()) });
        }
        let spec = FairnessSpec { intersections: vec![vec!["a".into(), "b".into()]], ..FairnessSpec::default() };
        let report = analyse(
            Task::Binary,
            &[GroupColumn { name: "a".into(), labels: a }, GroupColumn { name: "b".into(), labels: b }],
            &Labels::Classes { rows: y.into_iter().map(usize::from).collect(), classes: 2 },
            &probs,
            Some(Decision { threshold: 0.5, favourable: None, favourable_is_positive: true }),
            &spec,
            20,
            4,
        )
        .unwrap();
        let columns: Vec<&str> = report.columns.iter().map(|c| c.column.as_str()).collect();
        assert_eq!(columns, ["a", "b", "a & b"]);
        let levels: Vec<(&str, usize)> = report.columns[2].groups.iter().map(|g| (g.level.as_str(), g.rows)).collect();
        assert_eq!(levels, [("x & (missing)", 40), ("x & u", 160), ("y & (missing)", 40), ("y & u", 160)]);
        // Rows i % 4 == 0 are decided positive: all of them lie in group x.
        let x = &report.columns[0].groups[0];
        assert_eq!(x.figures[SELECTION_RATE].value, 0.5);
        assert_eq!(report.columns[0].groups[1].figures[SELECTION_RATE].value, 0.0);
    }
}
