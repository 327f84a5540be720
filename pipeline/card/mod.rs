//! The model card: a typed context built in one place from a results folder alone (never from a
//! live experiment), rendered with tera from `templates/` (embedded; a user folder overrides them
//! file by file), plus its SVG figures. Every string that comes from data or from the manifest is
//! escaped for markdown before it enters the context; numbers are formatted with fixed digits, so
//! the card is byte-stable for the same results.

pub mod evidence;
pub mod limitations;
pub mod plots;

use serde::Serialize;
use serde_json::Value;
use std::collections::BTreeMap;
use std::path::Path;

use crate::data::prep::{InputEncoding, Preprocessor};
use crate::error::{Error, Result};
use crate::experiment::plan::{config_label, PlannedConfig};
use crate::format::{fixed, sig};
use crate::manifest::{Manifest, SelectionRule, Task};
use crate::numerics::NumericsFingerprint;
use crate::results::StoredResults;
use crate::selection::{standard_error, Selection, Spread};
use crate::store::run::StoredRun;
use crate::store::{read_json, write_atomic, Layout};
use crate::text::{code_span, markdown_line as md_line, markdown_safe as md, markdown_text as md_text};
use limitations::{derive, Limitation};
use plots::{Chart, Series};

/// Rendered figures: (file name, alt text, SVG).
type Figures = Vec<(String, String, String)>;

const TEMPLATES: &[(&str, &str)] = &[
    ("card.md.tera", include_str!("../../templates/card.md.tera")),
    ("cautions.md.tera", include_str!("../../templates/cautions.md.tera")),
];

#[derive(Serialize)]
struct Row {
    cells: Vec<String>,
}

impl Row {
    fn of(cells: impl IntoIterator<Item = String>) -> Self {
        Row { cells: cells.into_iter().collect() }
    }
}

#[derive(Serialize)]
struct Figure {
    file: String,
    alt: String,
}

/// Purpose, ownership and the reviewer's fields.
#[derive(Serialize)]
struct About {
    name: String,
    description: String,
    intended_use: String,
    out_of_scope: String,
    owner: String,
    trained_by: String,
    data_period: String,
    population: String,
    affects_people: bool,
    group_columns: Vec<String>,
}

/// The data section: source, split, columns, target and how features became inputs.
#[derive(Serialize)]
struct DataSection {
    path: String,
    /// How `path` is to be read: relative to the manifest, or absolute.
    path_base: String,
    bytes: u64,
    outside_project: bool,
    file_sha256: String,
    content_sha256: String,
    rows: usize,
    duplicate_rows: String,
    split: [usize; 3],
    split_method: String,
    column_rows: Vec<Row>,
    class_rows: Vec<Row>,
    target_rows: Vec<Row>,
    warnings: Vec<String>,
    preprocessing: String,
    encoding_rows: Vec<Row>,
    group_note: String,
}

/// Capacity and regularization of the selected configuration.
#[derive(Serialize)]
struct Capacity {
    architecture: String,
    activation: String,
    residual: bool,
    batch_norm: bool,
    parameter_count: usize,
    rows_per_parameter: String,
    regularizer_rows: Vec<Row>,
    optimizer: String,
    schedule: String,
    epochs: String,
    grid_rows: Vec<Row>,
    seeds: String,
}

/// A confusion matrix with its per-class report, at one decision threshold.
#[derive(Serialize)]
struct Decision {
    title: String,
    header: Vec<String>,
    confusion_rows: Vec<Row>,
    class_rows: Vec<Row>,
}

/// Selection, validation and test results.
#[derive(Serialize)]
struct Results {
    metric: String,
    direction: String,
    selected_label: String,
    selected_run: String,
    selected_seed: u64,
    selection_text: String,
    headline: String,
    preference: String,
    validation_header: Vec<String>,
    validation_rows: Vec<Row>,
    baseline_line: String,
    test_rows: Vec<Row>,
    test_rows_count: usize,
    test_classes: String,
    why_one_run: String,
    decisions: Vec<Decision>,
    reliability_rows: Vec<Row>,
    group_rows: Vec<Row>,
}

#[derive(Serialize)]
struct Provenance {
    trained_at: String,
    fingerprint: String,
    tool_version: String,
    manifest_sha256: String,
    /// SHA-256 of the evidence lines of `integrity.sha256` ([`crate::store::integrity`]).
    results_digest: String,
    manifest_path: String,
    environment: Vec<Row>,
    git_commit: String,
    git_dirty: String,
    jobs: String,
    results_folder: String,
    verify_command: String,
    train_command: String,
}

#[derive(Serialize)]
struct CardContext {
    about: About,
    task: String,
    target: String,
    positive_label: String,
    data: DataSection,
    capacity: Capacity,
    results: Results,
    figures: Vec<Figure>,
    limitations: Vec<Limitation>,
    provenance: Provenance,
}

/// A metric's mean ± standard deviation across seeds, 4 decimals.
fn spread_text(s: Option<&Spread>) -> String {
    s.map(|s| format!("{} ± {}", fixed(s.mean, 4), fixed(s.sd, 4))).unwrap_or_else(|| "–".into())
}

fn value_text(v: &Value) -> String {
    md(&v.to_string())
}

fn figure_name(key: &str) -> String {
    let slug: String = key.chars().map(|c| if c.is_ascii_alphanumeric() { c } else { '-' }).collect();
    format!("grid-{slug}.svg")
}

/// Builds the figures: (file name, alt text, svg).
fn figures(manifest: &Manifest, selection: &Selection, selected_runs: &[&StoredRun]) -> Result<Figures> {
    let mut out = Vec::new();
    let mut series = Vec::new();
    for (colour, r) in selected_runs.iter().enumerate() {
        let h = r.history()?;
        series.push(Series {
            name: format!("seed {} train", r.record.seed),
            points: h.iter().map(|e| (e.epoch as f64, e.train_loss)).collect(),
            errors: None,
            dashed: false,
            colour,
        });
        series.push(Series {
            name: format!("seed {} validation", r.record.seed),
            points: h.iter().map(|e| (e.epoch as f64, e.validation_loss)).collect(),
            errors: None,
            dashed: true,
            colour,
        });
    }
    let chart = Chart {
        title: "Learning curves, selected configuration".into(),
        x_label: "epoch".into(),
        y_label: "loss".into(),
        series,
        x_categories: None,
        diagonal: false,
        fixed_unit_axes: false,
    };
    out.push((
        "learning-curves.svg".into(),
        "training (solid) and validation (dashed) loss per epoch for every seed of the selected configuration".into(),
        chart.render(),
    ));

    let m = &selection.metric;
    for (key, values) in &manifest.sweep.grid {
        let others: Vec<&String> = manifest.sweep.grid.keys().filter(|k| *k != key).collect();
        // Per line of the chart: validation points, their seed sd, training points.
        type Line = (Vec<(f64, f64)>, Vec<f64>, Vec<(f64, f64)>);
        let mut lines: BTreeMap<String, Line> = BTreeMap::new();
        for c in selection.configs.iter().filter(|c| !c.baseline) {
            let Some(v) = c.overrides.get(key) else { continue };
            let Some(x) = values.iter().position(|g| g == v) else { continue };
            let label = if others.is_empty() {
                "network".to_string()
            } else {
                others
                    .iter()
                    .map(|k| {
                        format!("{}={}", k.rsplit('.').next().unwrap_or(k), c.overrides.get(*k).map(|v| v.to_string()).unwrap_or_default())
                    })
                    .collect::<Vec<_>>()
                    .join(" ")
            };
            let entry = lines.entry(label).or_default();
            if let Some(s) = c.validation.get(m) {
                entry.0.push((x as f64, s.mean));
                entry.1.push(s.sd);
            }
            if let Some(s) = c.train.get(m) {
                entry.2.push((x as f64, s.mean));
            }
        }
        let mut series = Vec::new();
        for (colour, (label, (val, sd, train))) in lines.into_iter().enumerate() {
            series.push(Series { name: format!("{label} validation"), points: val, errors: Some(sd), dashed: false, colour });
            series.push(Series { name: format!("{label} train"), points: train, errors: None, dashed: true, colour });
        }
        let chart = Chart {
            title: format!("{m} across {key}"),
            x_label: key.clone(),
            y_label: m.clone(),
            series,
            x_categories: Some(values.iter().map(|v| v.to_string()).collect()),
            diagonal: false,
            fixed_unit_axes: false,
        };
        out.push((
            figure_name(key),
            format!("validation (solid, mean ± sd across seeds) and training (dashed) {m} for each value of {key}"),
            chart.render(),
        ));
    }
    if !selection.test.reliability.is_empty() {
        let points: Vec<(f64, f64)> = selection.test.reliability.iter().map(|b| (b.mean_predicted, b.observed)).collect();
        let chart = Chart {
            title: "Reliability diagram, selected run, test split".into(),
            x_label: "mean predicted probability".into(),
            y_label: "observed share of positives".into(),
            series: vec![Series { name: "selected run".into(), points, errors: None, dashed: false, colour: 0 }],
            x_categories: None,
            diagonal: true,
            fixed_unit_axes: true,
        };
        out.push(("reliability.svg".into(), "observed share of positives against mean predicted probability in 10 equal-width bins closed on the right (row counts in the table below); the dashed diagonal is perfect calibration".into(), chart.render()));
    }
    Ok(out)
}

fn about(m: &Manifest) -> About {
    let e = &m.experiment;
    let stated = |s: &str| if s.trim().is_empty() { "not stated".to_string() } else { md_text(s) };
    // Owner and trainer sit in table cells: one line each, whatever the manifest holds.
    let stated_cell = |s: &str| if s.trim().is_empty() { "not stated".to_string() } else { crate::text::markdown_cell_text(s) };
    About {
        name: md(&e.name),
        description: md_text(&e.description),
        intended_use: stated(&e.intended_use),
        out_of_scope: stated(&e.out_of_scope),
        owner: stated_cell(&e.owner),
        trained_by: stated_cell(&e.trained_by),
        data_period: stated(&e.data_period),
        population: stated(&e.population),
        affects_people: e.affects_people,
        group_columns: m.data.group_columns.iter().map(|g| md(g)).collect(),
    }
}

fn split_method(m: &Manifest) -> String {
    let s = &m.split;
    match (&s.column, &s.group) {
        (Some(c), _) => format!(
            "given by column {} (train {}, validation {}, test {})",
            code_span(c),
            list(&s.labels.train),
            list(&s.labels.validation),
            list(&s.labels.test)
        ),
        (None, Some(g)) => format!(
            "seeded by whole groups of {}: every row of one value in one split{}, split seed {}",
            code_span(g),
            if s.stratify && m.data.task != Task::Regression { ", groups stratified by their most common class" } else { "" },
            s.seed
        ),
        (None, None) if s.stratify && m.data.task != Task::Regression => {
            format!("seeded by rows, stratified by class, split seed {}", s.seed)
        }
        (None, None) => format!("seeded by rows, split seed {}", s.seed),
    }
}

fn list(labels: &[String]) -> String {
    labels.iter().map(|l| code_span(l)).collect::<Vec<_>>().join(" or ")
}

/// How the features became the network's inputs, in one sentence and one row per feature.
fn preprocessing(p: &Preprocessor) -> (String, Vec<Row>) {
    let mut rows = Vec::new();
    let (mut numeric, mut numeric_flag, mut categorical, mut categorical_flag) = (0, 0, 0, 0);
    for input in &p.inputs {
        match input {
            InputEncoding::Numeric { name, impute, mean, scale, indicator, .. } => {
                numeric += 1;
                numeric_flag += *indicator as usize;
                let missing = if *indicator {
                    format!("; missing → training median {} plus a missing flag", sig(*impute, 4))
                } else {
                    String::new()
                };
                rows.push(Row::of([
                    md(name),
                    format!("numeric, standardised: (x − {}) / {}{missing}", sig(*mean, 4), sig(*scale, 4)),
                    (1 + *indicator as usize).to_string(),
                ]));
            }
            InputEncoding::Categorical { name, levels, impute, indicator } => {
                categorical += 1;
                categorical_flag += *indicator as usize;
                let missing = if *indicator {
                    format!(
                        "; missing → most frequent level {} plus a missing flag",
                        levels.get(*impute).map(|l| code_span(l)).unwrap_or_default()
                    )
                } else {
                    String::new()
                };
                rows.push(Row::of([
                    md(name),
                    format!("one-hot over {} training levels plus one column for levels unseen in training{missing}", levels.len()),
                    (levels.len() + 1 + *indicator as usize).to_string(),
                ]));
            }
        }
    }
    let line = format!(
        "{} features became {} network inputs, fitted on the training rows only: {numeric} numeric (standardised by training mean and standard deviation; {numeric_flag} with a missing flag) and {categorical} categorical (one-hot plus an unseen-level column; {categorical_flag} with a missing flag).",
        p.inputs.len(),
        p.width()
    );
    (line, rows)
}

fn data_section(st: &StoredResults) -> DataSection {
    let (summary, record) = (&st.summary, &st.record);
    let column_rows = summary
        .columns
        .iter()
        .map(|c| {
            let detail = match &c.numeric {
                Some(n) if c.kind == "boolean" => format!("true in {}% of rows", fixed(100.0 * n.mean, 1)),
                Some(n) => format!("{} to {} (median {})", sig(n.min, 4), sig(n.max, 4), sig(n.median, 4)),
                None => {
                    let top: Vec<String> = c.top_levels.iter().take(3).map(|l| format!("{} ({})", md(&l.level), l.count)).collect();
                    format!("{} levels; most frequent {}", c.distinct, top.join(", "))
                }
            };
            let kind = if c.categorical { format!("{} (categorical)", c.kind) } else { c.kind.clone() };
            Row::of([md(&c.name), c.role.clone(), kind, format!("{} ({}%)", c.missing, fixed(100.0 * c.missing_share, 1)), detail])
        })
        .collect();
    let class_rows = summary
        .target
        .classes
        .iter()
        .map(|l| {
            Row::of([md(&l.level), l.count.to_string(), format!("{}%", fixed(100.0 * l.count as f64 / summary.rows.max(1) as f64, 1))])
        })
        .collect();
    let target_rows = summary
        .target
        .distribution
        .iter()
        .flat_map(|d| {
            [
                ("mean", d.mean),
                ("standard deviation", d.std),
                ("minimum", d.min),
                ("25th percentile", d.q25),
                ("median", d.median),
                ("75th percentile", d.q75),
                ("maximum", d.max),
            ]
            .map(|(name, v)| Row::of([name.to_string(), sig(v, 4)]))
        })
        .collect();
    let (preprocessing, encoding_rows) = preprocessing(&st.preprocessor);
    let group_note = if st.manifest.data.group_columns.is_empty() {
        String::new()
    } else {
        format!(
            "Columns with the role \"group\" ({}) describe groups of people; they are not network inputs and serve only the per-group test results below.",
            st.manifest.data.group_columns.iter().map(|g| md(g)).collect::<Vec<_>>().join(", ")
        )
    };
    DataSection {
        path: code_span(&record.data.path),
        path_base: if Path::new(&record.data.path).is_absolute() {
            "an absolute path: it names one machine's file, not one that travels with the project".into()
        } else {
            "relative to the manifest".into()
        },
        bytes: record.data.bytes,
        outside_project: record.data.outside_project,
        file_sha256: record.data.file_sha256.clone(),
        content_sha256: record.data.content_sha256.clone(),
        rows: summary.rows,
        duplicate_rows: match summary.duplicate_rows {
            Some(n) => format!("of which {n} repeat an earlier row exactly (features and target)"),
            None => "duplicates not counted by the tabcard version that wrote these results".into(),
        },
        split: record.split_rows,
        split_method: split_method(&st.manifest),
        column_rows,
        class_rows,
        target_rows,
        warnings: summary.warnings.iter().map(|w| md(w)).collect(),
        preprocessing,
        encoding_rows,
        group_note,
    }
}

fn capacity(st: &StoredResults, selected_cfg: &PlannedConfig, selected_run: &StoredRun) -> Capacity {
    let (model, training) = (&selected_cfg.config.model, &selected_cfg.config.training);
    let selected_summary = st.selection.selected_summary();
    let regularizer_rows =
        crate::training::regularizers::REGULARIZERS.iter().map(|r| Row::of([r.name.to_string(), (r.setting)(model, training)])).collect();
    let grid_rows = st
        .manifest
        .sweep
        .grid
        .iter()
        .map(|(k, v)| {
            Row::of([
                md(k),
                v.iter().map(value_text).collect::<Vec<_>>().join(", "),
                selected_cfg.overrides.get(k).map(value_text).unwrap_or_default(),
            ])
        })
        .collect();
    let hidden = if model.hidden.is_empty() {
        "no hidden layer".to_string()
    } else {
        format!("hidden widths {}", model.hidden.iter().map(|w| w.to_string()).collect::<Vec<_>>().join(", "))
    };
    let momentum = if training.optimizer == crate::manifest::Optimizer::Sgd {
        format!(", momentum {}{}", sig(training.momentum, 3), if training.nesterov { ", Nesterov" } else { "" })
    } else {
        format!(", betas {} / {}", sig(training.beta1, 4), sig(training.beta2, 4))
    };
    let best_epoch = selected_summary
        .and_then(|s| s.best_epoch.as_ref())
        .map(|s| format!("{} ± {}", sig(s.mean, 3), sig(s.sd, 2)))
        .unwrap_or_else(|| "–".into());
    Capacity {
        architecture: format!(
            "{} features encoded as {} inputs → {hidden} → {} output(s)",
            st.record.features.len(),
            st.preprocessor.width(),
            selected_run.record.head.outputs()
        ),
        activation: model.activation.as_str().into(),
        residual: model.residual,
        batch_norm: model.batch_norm,
        parameter_count: selected_run.record.parameter_count,
        rows_per_parameter: sig(st.record.split_rows[0] as f64 / selected_run.record.parameter_count.max(1) as f64, 3),
        regularizer_rows,
        optimizer: format!(
            "{} (learning rate {}{momentum}, batch size {})",
            training.optimizer.as_str(),
            sig(training.learning_rate, 4),
            training.batch_size
        ),
        schedule: format!("{:?} with {} warm-up epoch(s)", training.schedule, training.warmup_epochs).to_lowercase(),
        epochs: format!("at most {}; best epoch per seed {best_epoch} (mean ± sd)", training.epochs),
        grid_rows,
        seeds: st.manifest.sweep.seeds.iter().map(|s| s.to_string()).collect::<Vec<_>>().join(", "),
    }
}

fn decision(
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

fn selection_text(sel: &Selection, direction: &str) -> String {
    let m = &sel.metric;
    let label =
        |id: &str| sel.configs.iter().find(|c| c.config_id == id).map(|c| md(&config_label(&c.overrides, c.baseline))).unwrap_or_default();
    if sel.rule == SelectionRule::OneStandardError.as_str() {
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
        format!("chosen by the one-standard-error rule: the configuration with the fewest parameters whose mean validation {m} across seeds lies within one standard error of the best mean ({direction}; Breiman et al. 1984, common practice); {outcome}")
    } else {
        format!("chosen by the best mean validation {m} across seeds ({direction})")
    }
}

fn results(st: &StoredResults, limitations: &[Limitation]) -> Results {
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
            cells.push(
                c.gap
                    .as_ref()
                    .map(|g| format!("{} ± {}", fixed(sel.worse_on_validation(g.mean), 4), fixed(g.sd, 4)))
                    .unwrap_or_else(|| "–".into()),
            );
            Row { cells }
        })
        .collect();
    let selected_summary = sel.selected_summary();
    let baseline_summary = sel.configs.iter().find(|c| c.baseline);
    let baseline_line = match (selected_summary.and_then(|s| s.validation.get(m)), baseline_summary.and_then(|s| s.validation.get(m))) {
        (Some(n), Some(b)) => format!(
            "Validation {m}: network {} against linear baseline {} (difference {}).",
            spread_text(Some(n)),
            spread_text(Some(b)),
            fixed(n.mean - b.mean, 4)
        ),
        _ => "No linear baseline was trained (selection.baseline = false).".into(),
    };
    let t = &sel.test;
    let test_rows = t
        .metrics
        .iter()
        .filter_map(|(k, v)| {
            let v = (*v)?;
            let ci = t.intervals.get(k).map(|i| format!("[{}, {}]", fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_else(|| "–".into());
            Some(Row::of([k.clone(), fixed(v, 4), ci, spread_text(t.across_seeds.get(k))]))
        })
        .collect();
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
        "A reviewer should prefer the linear baseline: it beats the selected network on validation data beyond seed noise (see the known limitations).".to_string()
    } else if serious.iter().any(|l| l.rule == "no_better_than_chance") {
        "Do not use this model for decisions: its test results are not shown to beat chance (see the known limitations).".to_string()
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
            .map(|(i, r)| format!("{} {}", r.iter().sum::<usize>(), labels.get(i).cloned().unwrap_or_default()))
            .collect();
        format!(" The test split holds {}.", counts.join(", "))
    };
    let mut decisions = Vec::new();
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
            format!(
                "At threshold {} chosen on the validation rows by Youden's J (largest true-positive rate minus false-positive rate; Youden 1950): positive when the probability is at least {}; on validation, true-positive rate {} and false-positive rate {}",
                sig(th.threshold, 4), sig(th.threshold, 4), fixed(th.validation_tpr, 4), fixed(th.validation_fpr, 4)
            ),
            &labels,
            &th.confusion,
            &th.per_class,
        ));
    }
    let reliability_rows = t
        .reliability
        .iter()
        .map(|b| {
            Row::of([
                // Closed on the right; the first bin also holds 0.
                format!("{}{}, {}]", if b.lower == 0.0 { "[" } else { "(" }, sig(b.lower, 2), sig(b.upper, 2)),
                b.count.to_string(),
                fixed(b.mean_predicted, 4),
                fixed(b.observed, 4),
            ])
        })
        .collect();
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
        selection_text: selection_text(sel, direction),
        headline,
        preference,
        validation_header,
        validation_rows,
        baseline_line,
        test_rows,
        test_rows_count: t.rows,
        test_classes,
        why_one_run: format!(
            "The test figures come from one run, the seed of the selected configuration with the best validation {m} (seed {}): a model that ships is one set of weights, and that run's weights are the ones stored and scored. The last column shows every seed of the configuration on the same test rows, so the spread a retraining would bring is visible.",
            t.seed
        ),
        decisions,
        reliability_rows,
        group_rows,
    }
}

fn provenance(st: &StoredResults, layout: &Layout, environment: &NumericsFingerprint) -> Provenance {
    let timing = st.timing.as_ref();
    let folder = layout.root.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    Provenance {
        trained_at: md(&timing.map(|t| t.trained_at.clone()).unwrap_or_else(|| "unknown".into())),
        fingerprint: st.record.fingerprint.clone(),
        tool_version: st.record.tool_version.clone(),
        manifest_sha256: st.record.manifest_sha256.clone(),
        results_digest: String::new(),
        manifest_path: code_span(&st.record.manifest_path),
        environment: vec![
            Row::of(["tabcard".into(), md_line(&format!("{} (source commit {})", environment.tool_version, environment.tool_commit))]),
            Row::of([
                "numerics".into(),
                md_line(&format!(
                    "kernels {}, dispatch level {} (the level changes speed, never a bit)",
                    environment.kernel_version, environment.kernel_level
                )),
            ]),
            Row::of([
                "numerical kernels".into(),
                md_line(&format!(
                    "{}; model definition and stored form: candle {}",
                    environment.kernel_features, environment.candle_version
                )),
            ]),
            Row::of(["target".into(), md(&format!("{} {}", environment.target_arch, environment.target_os))]),
            Row::of(["CPU features".into(), md_line(&environment.cpu_features.join(" "))]),
            Row::of(["C library".into(), md(&environment.libc)]),
            Row::of(["threads per run".into(), environment.threads_per_run.to_string()]),
        ],
        git_commit: code_span(&timing.and_then(|t| t.git_commit.clone()).unwrap_or_else(|| "not in a git repository".into())),
        git_dirty: match timing.and_then(|t| t.git_dirty) {
            Some(true) => "yes".into(),
            Some(false) => "no".into(),
            None => "unknown".into(),
        },
        jobs: timing.map(|t| t.jobs.to_string()).unwrap_or_else(|| "unknown".into()),
        verify_command: code_span(&format!("tabcard verify {folder}")),
        results_folder: code_span(&folder),
        train_command: code_span(&format!("tabcard train {} --results <empty folder>", st.record.manifest_path)),
    }
}

fn build(layout: &Layout) -> Result<(CardContext, Figures)> {
    let st = StoredResults::read(layout)?;
    let sel = &st.selection;
    let selected_runs: Vec<&StoredRun> =
        st.runs.iter().filter(|r| r.record.config_id == sel.selected_config && r.record.outcome.is_completed()).collect();
    let selected_cfg =
        st.plan.config(&sel.selected_config).ok_or_else(|| Error::store(layout.plan(), "does not list the selected configuration"))?;
    let selected_run = st
        .runs
        .iter()
        .find(|r| r.record.run_id == sel.selected_run)
        .ok_or_else(|| Error::store(layout.runs(), "the selected run is missing"))?;
    let environment: NumericsFingerprint = read_json(&selected_run.dir.join(crate::store::run::ENVIRONMENT))?;
    let evidence = evidence::gather(&st.manifest, &st.record, &st.summary, sel, selected_cfg, selected_run.record.parameter_count);
    let limitations: Vec<Limitation> =
        derive(&evidence).into_iter().map(|l| Limitation { finding: md_line(&l.finding), threshold: md_line(&l.threshold), ..l }).collect();
    let figs = figures(&st.manifest, sel, &selected_runs)?;
    let context = CardContext {
        about: about(&st.manifest),
        task: st.manifest.data.task.as_str().into(),
        target: md(&st.manifest.data.target),
        positive_label: if st.manifest.data.task == Task::Binary {
            st.record.class_labels.get(1).map(|l| code_span(l)).unwrap_or_default()
        } else {
            String::new()
        },
        data: data_section(&st),
        capacity: capacity(&st, selected_cfg, selected_run),
        results: results(&st, &limitations),
        figures: figs.iter().map(|(f, a, _)| Figure { file: f.clone(), alt: md(a) }).collect(),
        limitations,
        provenance: provenance(&st, layout, &environment),
    };
    Ok((context, figs))
}

fn tera(templates: Option<&Path>) -> Result<tera::Tera> {
    let mut t = tera::Tera::default();
    t.autoescape_on(vec![]);
    let mut sources: BTreeMap<String, String> = TEMPLATES.iter().map(|(n, s)| (n.to_string(), s.to_string())).collect();
    if let Some(dir) = templates {
        let entries = std::fs::read_dir(dir).map_err(|e| Error::io(dir, "read the template folder", e))?;
        for entry in entries.flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            if name.ends_with(".tera") {
                let text = std::fs::read_to_string(entry.path()).map_err(|e| Error::io(entry.path(), "read the template", e))?;
                sources.insert(name, text);
            }
        }
    }
    t.add_raw_templates(sources.into_iter().collect::<Vec<_>>()).map_err(|e| Error::Usage(format!("card template: {e:?}")))?;
    Ok(t)
}

/// Renders the card text and figures from a results folder without writing anything.
pub fn render(layout: &Layout, templates: Option<&Path>, results_digest: &str) -> Result<(String, Vec<(String, String)>)> {
    let (mut context, figs) = build(layout)?;
    context.provenance.results_digest = results_digest.to_string();
    let ctx = tera::Context::from_serialize(&context).map_err(|e| Error::Internal(format!("card context: {e}")))?;
    let text = tera(templates)?.render("card.md.tera", &ctx).map_err(|e| {
        let mut msg = e.to_string();
        let mut source = std::error::Error::source(&e);
        while let Some(s) = source {
            msg.push_str(&format!(": {s}"));
            source = s.source();
        }
        Error::Usage(format!("rendering the card: {msg}"))
    })?;
    Ok((text, figs.into_iter().map(|(f, _, svg)| (f, svg)).collect()))
}

/// Renders and writes `card.md` and `figures/` (atomically, file by file), naming the results
/// digest of the evidence, and seals the folder's integrity list. Returns the digest.
pub fn write_card(layout: &Layout, templates: Option<&Path>) -> Result<String> {
    crate::store::integrity::seal(&layout.root, |digest| {
        let (text, figs) = render(layout, templates, digest)?;
        crate::store::create_dir(&layout.figures())?;
        for (name, svg) in figs {
            write_atomic(&layout.figures().join(name), svg.as_bytes())?;
        }
        write_atomic(&layout.card(), text.as_bytes())
    })
}
