//! The results sections: validation across seeds, the selection, the one test evaluation with
//! its intervals, the decisions at each threshold and per-group results.

use serde::Serialize;

use crate::card::limitations::Limitation;
use crate::experiment::plan::config_label;
use crate::format::{fixed, sig};
use crate::manifest::{SelectionRule, Task};
use crate::results::StoredResults;
use crate::selection::{standard_error, Selection};
use crate::text::markdown_safe as md;

use crate::card::cells::{spread_text, Row};

/// The card's sentence for a model whose test results are not shown to beat chance (`list` looks
/// for it).
pub(crate) const DO_NOT_USE: &str =
    "Do not use this model for decisions: its test results are not shown to beat chance (see the known limitations).";
/// The card's sentence when the linear baseline beats the selected network (`list` looks for it).
pub(crate) const PREFER_BASELINE: &str =
    "A reviewer should prefer the linear baseline: it beats the selected network on validation data beyond seed noise (see the known limitations).";

/// A confusion matrix with its per-class report, at one decision threshold.
#[derive(Serialize)]
pub(crate) struct Decision {
    pub(crate) title: String,
    pub(crate) header: Vec<String>,
    pub(crate) confusion_rows: Vec<Row>,
    pub(crate) class_rows: Vec<Row>,
}

/// Selection, validation and test results.
#[derive(Serialize)]
pub(crate) struct Results {
    pub(crate) metric: String,
    pub(crate) direction: String,
    pub(crate) selected_label: String,
    pub(crate) selected_run: String,
    pub(crate) selected_seed: u64,
    /// Seeds averaged when a seed ensemble is deployed (0: the selected run alone).
    pub(crate) ensemble_seeds: usize,
    pub(crate) selection_text: String,
    pub(crate) headline: String,
    pub(crate) preference: String,
    pub(crate) validation_header: Vec<String>,
    pub(crate) validation_rows: Vec<Row>,
    pub(crate) baseline_line: String,
    pub(crate) test_rows: Vec<Row>,
    pub(crate) test_rows_count: usize,
    /// One plain-language line per metric the test table shows.
    pub(crate) meanings: Vec<String>,
    pub(crate) test_classes: String,
    pub(crate) why_one_run: String,
    pub(crate) decisions: Vec<Decision>,
    pub(crate) group_rows: Vec<Row>,
}

pub(crate) fn decision(
    title: String,
    labels: &[String],
    confusion: &[Vec<usize>],
    per_class: &[crate::metrics::classification::ClassReport],
) -> Decision {
    Decision {
        title,
        header: std::iter::once("true \\\\ predicted".to_string()).chain(labels.iter().cloned()).collect(),
        confusion_rows: confusion
            .iter()
            .enumerate()
            .map(|(i, r)| Row::of(std::iter::once(labels.get(i).cloned().unwrap_or_default()).chain(r.iter().map(|n| n.to_string()))))
            .collect(),
        class_rows: per_class
            .iter()
            .enumerate()
            .map(|(i, c)| {
                Row::of([
                    labels.get(i).cloned().unwrap_or_default(),
                    fixed(c.precision, 4),
                    fixed(c.recall, 4),
                    fixed(c.f1, 4),
                    c.support.to_string(),
                ])
            })
            .collect(),
    }
}

/// Which model the test figures describe: the selected run alone, or the seed ensemble with the
/// selected run alone beside it.
fn why_these_figures(sel: &Selection, m: &str) -> String {
    let t = &sel.test;
    match &sel.ensemble {
        None => format!(
            "The test figures come from one run, the seed of the selected configuration with the best validation {m} (seed {}): a model that ships is one set of weights, and that run's weights are the ones stored and scored. The last column shows every seed of the configuration on the same test rows, so the spread a retraining would bring is visible.",
            t.seed
        ),
        Some(e) => {
            let parameters = sel.selected_summary().map(|c| c.parameter_count).unwrap_or(0);
            let single = match e.single_run.get(m) {
                Some(i) => format!("{} (95% bootstrap interval {} to {})", fixed(i.estimate, 4), fixed(i.lower, 4), fixed(i.upper, 4)),
                None => "undefined".into(),
            };
            format!(
                "The deployed model is a seed ensemble (`[selection] ensemble`; Lakshminarayanan, Pritzel & Blundell 2017): the mean of the outputs of all {} seeds of the selected configuration{}, {} parameters in all, and the test figures are the ensemble's. Alone, the seed with the best validation {m} (seed {}) scores test {m} {single} on the same resamples. The last column shows every seed alone.",
                e.members.len(),
                if e.maps.is_empty() { "" } else { ", each through its own calibration map" },
                parameters * e.members.len(),
                t.seed
            )
        }
    }
}

pub(crate) fn selection_text(sel: &Selection, direction: &str) -> String {
    let m = &sel.metric;
    let label =
        |id: &str| sel.configs.iter().find(|c| c.config_id == id).map(|c| md(&config_label(&c.overrides, c.baseline))).unwrap_or_default();
    if sel.rule == SelectionRule::OneStandardError {
        let best = sel.configs.iter().find(|c| c.config_id == sel.best_config);
        let best_text = best
            .and_then(|b| b.validation.get(m))
            .map(|s| format!("{} ± {} (sd), standard error {}", fixed(s.mean, 4), fixed(s.sd, 4), sig(standard_error(s), 2)))
            .unwrap_or_default();
        let outcome = if sel.best_config == sel.selected_config {
            "the best configuration is also the smallest within that margin".to_string()
        } else {
            format!("the best mean was {} at {best_text}", label(&sel.best_config))
        };
        format!("chosen by the one-standard-error rule: the configuration with the fewest parameters whose mean validation {m} across seeds lies within one standard error of the best mean ({direction}; Breiman et al. 1984, common practice; of two with as many parameters, the better mean); {outcome}")
    } else {
        format!("chosen by the best mean validation {m} across seeds ({direction}; of equal means, the first in plan order)")
    }
}

pub(crate) fn results(st: &StoredResults, limitations: &[Limitation]) -> Results {
    let sel = &st.selection;
    let m = &sel.metric;
    let task = st.manifest.data.task;
    let direction = if sel.higher_is_better { "higher is better" } else { "lower is better" };
    let shown: Vec<&str> = crate::metrics::registry::table(task).iter().filter(|m| m.on_card).map(|m| m.name).collect();
    let mut validation_header = vec!["configuration".to_string(), "parameters".into(), "seeds".into()];
    validation_header.extend(shown.iter().map(|s| s.to_string()));
    validation_header.push(format!("{m}: train better than validation by"));
    let validation_rows = sel
        .configs
        .iter()
        .map(|c| {
            let mut label = md(&config_label(&c.overrides, c.baseline));
            if c.config_id == sel.selected_config {
                label = format!("**{label}** (selected)");
            }
            let seeds =
                if c.runs_failed > 0 { format!("{} ({} failed)", c.runs_completed, c.runs_failed) } else { c.runs_completed.to_string() };
            let mut cells = vec![label, c.parameter_count.to_string(), seeds];
            cells.extend(shown.iter().map(|k| spread_text(c.validation.get(*k))));
            cells.push(c.gap.as_ref().map(|g| crate::format::mean_sd(sel.worse_on_validation(g.mean), g.sd)).unwrap_or_else(|| "–".into()));
            Row { cells }
        })
        .collect();
    let selected_summary = sel.selected_summary();
    let baseline_summary = sel.configs.iter().find(|c| c.baseline);
    let baseline_line = match (selected_summary.and_then(|s| s.validation.get(m)), baseline_summary.and_then(|s| s.validation.get(m))) {
        (Some(n), Some(b)) => {
            let model = match st.record.task {
                Task::Binary => "logistic regression",
                Task::Multiclass => "multinomial (softmax) logistic regression",
                Task::Regression => "linear regression",
            };
            format!(
                "Validation {m}: network {} against linear baseline {} (difference {}). The linear baseline is {model} on the same preprocessed inputs: the network with no hidden layer and no dropout, batch norm, residual or input noise, trained with the manifest's [training] settings (grid values aside) and the same seeds. It is judged on validation only: the test split is used once, for the selected run, so the baseline has no test figure.",
                spread_text(Some(n)),
                spread_text(Some(b)),
                fixed(n.mean - b.mean, 4)
            )
        }
        _ => "No linear baseline was trained (selection.baseline = false).".into(),
    };
    let t = &sel.test;
    // Layout 5 on, binary: the decision figures at the deployed threshold lead, and the same
    // figures at 0.5 (the argmax every seed's column uses) are named so.
    let at_threshold = t.chosen_threshold.as_ref().filter(|th| !th.metrics.is_empty());
    let mut test_rows: Vec<Row> = at_threshold
        .map(|th| {
            th.metrics
                .iter()
                .map(|(k, i)| {
                    Row::of([
                        format!("{k} at the deployed threshold {}", sig(th.threshold, 4)),
                        fixed(i.estimate, 4),
                        format!("[{}, {}]", fixed(i.lower, 4), fixed(i.upper, 4)),
                        "–".into(),
                    ])
                })
                .collect()
        })
        .unwrap_or_default();
    test_rows.extend(t.metrics.iter().filter_map(|(k, v)| {
        let v = (*v)?;
        let ci = t.intervals.get(k).map(|i| format!("[{}, {}]", fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_else(|| "–".into());
        let name = match at_threshold {
            Some(th) if th.metrics.contains_key(k) => format!("{k} at 0.5"),
            _ => k.clone(),
        };
        Some(Row::of([name, fixed(v, 4), ci, spread_text(t.across_seeds.get(k))]))
    }));
    let headline = match (t.metrics.get(m).copied().flatten(), t.intervals.get(m)) {
        (Some(v), Some(i)) => format!(
            "test {m} {} (95% bootstrap interval {} to {}, {} resamples)",
            fixed(v, 4),
            fixed(i.lower, 4),
            fixed(i.upper, 4),
            i.resamples
        ),
        (Some(v), None) => format!("test {m} {}", fixed(v, 4)),
        _ => format!("test {m} undefined"),
    };
    let serious: Vec<&Limitation> = limitations.iter().filter(|l| l.serious).collect();
    let preference = if serious.iter().any(|l| l.rule == "baseline_beats_network") {
        PREFER_BASELINE.to_string()
    } else if serious.iter().any(|l| l.rule == "no_better_than_chance") {
        DO_NOT_USE.to_string()
    } else {
        String::new()
    };
    let labels: Vec<String> = st.record.class_labels.iter().map(|l| md(l)).collect();
    let test_classes = if t.confusion.is_empty() {
        String::new()
    } else {
        let counts: Vec<String> = t
            .confusion
            .iter()
            .enumerate()
            .map(|(i, r)| {
                format!(
                    "{} of class {}",
                    crate::format::count(r.iter().sum::<usize>(), "row", "rows"),
                    labels.get(i).cloned().unwrap_or_default()
                )
            })
            .collect();
        format!(" The test split holds {}.", counts.join(", "))
    };
    let mut decisions = Vec::new();
    if let Some(th) = at_threshold {
        // Layout 5 on: the deployed decision first, 0.5 beside it for comparison.
        decisions.push(decision(
            super::decision::threshold_title(th, st.layout_version, sel.calibration.as_ref().map(|c| c.map.method().as_str())),
            &labels,
            &th.confusion,
            &th.per_class,
        ));
        decisions.push(decision(
            "For comparison, at threshold 0.5: positive when the positive-class probability is above 0.5 (the figures named \"at 0.5\" and every seed's column use it)".into(),
            &labels,
            &t.confusion,
            &t.per_class,
        ));
    } else {
        if !t.confusion.is_empty() {
            let default_rule = if task == Task::Binary {
                "threshold 0.5: positive when the positive-class probability is above 0.5"
            } else {
                "the most probable class"
            };
            decisions.push(decision(
                format!("At {default_rule} (accuracy and the other test figures use it)"),
                &labels,
                &t.confusion,
                &t.per_class,
            ));
        }
        if let Some(th) = &t.chosen_threshold {
            decisions.push(decision(
                super::decision::threshold_title(th, st.layout_version, sel.calibration.as_ref().map(|c| c.map.method().as_str())),
                &labels,
                &th.confusion,
                &th.per_class,
            ));
        }
    }
    let group_rows = t
        .groups
        .iter()
        .map(|g| {
            let value = g.metrics.get(m).copied().flatten().map(|v| fixed(v, 4)).unwrap_or_else(|| "undefined".into());
            let ci = g.intervals.get(m).map(|i| format!("[{}, {}]", fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_else(|| "–".into());
            Row::of([
                md(&g.column),
                md(&g.level),
                g.rows.to_string(),
                g.base_rate.map(|b| sig(b, 3)).unwrap_or_else(|| "–".into()),
                value,
                ci,
            ])
        })
        .collect();
    let selected_cfg_label = st.plan.config(&sel.selected_config).map(|c| md(&config_label(&c.overrides, false))).unwrap_or_default();
    Results {
        metric: m.clone(),
        direction: direction.into(),
        selected_label: selected_cfg_label,
        selected_run: sel.selected_run.clone(),
        selected_seed: t.seed,
        ensemble_seeds: sel.ensemble.as_ref().map_or(0, |e| e.members.len()),
        selection_text: selection_text(sel, direction),
        headline,
        preference,
        validation_header,
        validation_rows,
        baseline_line,
        test_rows,
        test_rows_count: t.rows,
        meanings: t
            .metrics
            .keys()
            .filter_map(|k| crate::metrics::registry::meaning(k))
            .map(|m| {
                format!("{}.", upper_first(&m.replace("the target's units", &format!("the units of {}", md(&st.manifest.data.target)))))
            })
            .collect(),
        test_classes,
        why_one_run: why_these_figures(sel, m),
        decisions,
        group_rows,
    }
}

/// `s` with its first letter in upper case.
fn upper_first(s: &str) -> String {
    let mut c = s.chars();
    c.next().map(|f| f.to_uppercase().chain(c).collect()).unwrap_or_default()
}
