//! The model card: a typed context built in one place from a results folder alone (never from a
//! live experiment), rendered with tera from `templates/` (embedded; a user folder overrides them
//! file by file), plus its SVG figures. Every string that comes from data or from the manifest is
//! escaped for markdown before it enters the context; numbers are formatted with fixed digits, so
//! the card is byte-stable for the same results.

pub mod limitations;
pub mod plots;

use serde::Serialize;
use serde_json::Value;
use std::collections::BTreeMap;
use std::path::Path;

use crate::commands::train::config_label;
use crate::data::summary::DataSummary;
use crate::error::{Error, Result};
use crate::experiment::ExperimentRecord;
use crate::format::{fixed, sig};
use crate::manifest::{Manifest, Task};
use crate::numerics::NumericsFingerprint;
use crate::plan::Plan;
use crate::selection::{Selection, Spread};
use crate::store::run::{read_run, StoredRun};
use crate::store::{read_json, write_atomic, Layout};
use crate::text::markdown_safe as md;
use limitations::{derive, Evidence, Limitation};
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

#[derive(Serialize)]
struct Figure {
    file: String,
    alt: String,
}

#[derive(Serialize)]
struct CardContext {
    name: String,
    description: String,
    intended_use: String,
    out_of_scope: String,
    owner: String,
    affects_people: bool,
    group_columns: Vec<String>,
    task: String,
    target: String,
    positive_label: String,
    trained_at: String,
    fingerprint: String,
    tool_version: String,
    manifest_sha256: String,
    /// SHA-256 of the evidence lines of `integrity.sha256` ([`crate::store::integrity`]).
    results_digest: String,
    manifest_path: String,
    data_path: String,
    data_resolved_path: String,
    data_outside: bool,
    data_file_sha256: String,
    data_content_sha256: String,
    data_bytes: u64,
    rows: usize,
    split: [usize; 3],
    split_seed: u64,
    stratified: bool,
    column_rows: Vec<Row>,
    target_rows: Vec<Row>,
    data_warnings: Vec<String>,
    selected_label: String,
    selected_run: String,
    selected_seed: u64,
    metric: String,
    direction: String,
    headline: String,
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
    validation_header: Vec<String>,
    validation_rows: Vec<Row>,
    baseline_line: String,
    test_rows: Vec<Row>,
    test_rows_count: usize,
    confusion_header: Vec<String>,
    confusion_rows: Vec<Row>,
    class_rows: Vec<Row>,
    group_rows: Vec<Row>,
    figures: Vec<Figure>,
    limitations: Vec<Limitation>,
    environment: Vec<Row>,
    git_commit: String,
    git_dirty: String,
    jobs: String,
    results_folder: String,
    train_command: String,
}

fn spread_text(s: Option<&Spread>) -> String {
    s.map(|s| format!("{} ± {}", fixed(s.mean, 4), fixed(s.sd, 4))).unwrap_or_else(|| "–".into())
}

fn value_text(v: &Value) -> String {
    md(&v.to_string())
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

fn load(layout: &Layout) -> Result<(Manifest, ExperimentRecord, DataSummary, Plan, Selection, Value)> {
    layout.check_format()?;
    let manifest: Manifest = read_json(&layout.manifest())?;
    let stored = std::fs::read_to_string(layout.manifest()).map_err(|e| Error::io(layout.manifest(), "read", e))?;
    let record: ExperimentRecord = read_json(&layout.experiment())?;
    if crate::fingerprint::sha256_hex(stored.as_bytes()) != record.manifest_sha256 {
        return Err(Error::store(layout.manifest(), "does not match the manifest hash recorded in experiment.json (it was edited after training)"));
    }
    let summary: DataSummary = read_json(&layout.data_summary())?;
    let plan: Plan = read_json(&layout.plan())?;
    let selection: Selection = read_json(&layout.selection())?;
    let timing: Value = if layout.timing().exists() { read_json(&layout.timing())? } else { Value::Null };
    Ok((manifest, record, summary, plan, selection, timing))
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
        series.push(Series { name: format!("seed {} train", r.record.seed), points: h.iter().map(|e| (e.epoch as f64, e.train_loss)).collect(), errors: None, dashed: false, colour });
        series.push(Series { name: format!("seed {} validation", r.record.seed), points: h.iter().map(|e| (e.epoch as f64, e.validation_loss)).collect(), errors: None, dashed: true, colour });
    }
    let chart = Chart { title: "Learning curves, selected configuration".into(), x_label: "epoch".into(), y_label: "loss".into(), series, x_categories: None, diagonal: false, fixed_unit_axes: false };
    out.push(("learning-curves.svg".into(), "training (solid) and validation (dashed) loss per epoch for every seed of the selected configuration".into(), chart.render()));

    let m = &selection.metric;
    for (key, values) in &manifest.sweep.grid {
        let others: Vec<&String> = manifest.sweep.grid.keys().filter(|k| *k != key).collect();
        // Per line of the chart: validation points, their seed sd, training points.
        type Line = (Vec<(f64, f64)>, Vec<f64>, Vec<(f64, f64)>);
        let mut lines: BTreeMap<String, Line> = BTreeMap::new();
        for c in selection.configs.iter().filter(|c| !c.baseline) {
            let Some(v) = c.overrides.get(key) else { continue };
            let Some(x) = values.iter().position(|g| g == v) else { continue };
            let label = if others.is_empty() { "network".to_string() } else {
                others.iter().map(|k| format!("{}={}", k.rsplit('.').next().unwrap_or(k), c.overrides.get(*k).map(|v| v.to_string()).unwrap_or_default())).collect::<Vec<_>>().join(" ")
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
        out.push((figure_name(key), format!("validation (solid, mean ± sd across seeds) and training (dashed) {m} for each value of {key}"), chart.render()));
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
        out.push(("reliability.svg".into(), "observed share of positives against mean predicted probability in 10 equal-width bins; the dashed diagonal is perfect calibration".into(), chart.render()));
    }
    Ok(out)
}

fn build(layout: &Layout) -> Result<(CardContext, Figures)> {
    let (manifest, record, summary, plan, selection, timing) = load(layout)?;
    let m = &selection.metric;
    let runs: Vec<StoredRun> = plan.runs.iter().filter_map(|r| read_run(layout, &r.id).transpose()).collect::<Result<_>>()?;
    let selected_runs: Vec<&StoredRun> = runs.iter().filter(|r| r.record.config_id == selection.selected_config && r.record.outcome.is_completed()).collect();
    let selected_cfg = plan.config(&selection.selected_config).ok_or_else(|| Error::store(layout.plan(), "does not list the selected configuration"))?;
    let selected_summary = selection.configs.iter().find(|c| c.config_id == selection.selected_config);
    let baseline_summary = selection.configs.iter().find(|c| c.baseline);
    let selected_run = runs.iter().find(|r| r.record.run_id == selection.selected_run).ok_or_else(|| Error::store(layout.runs(), "the selected run is missing"))?;
    let environment: NumericsFingerprint = read_json(&selected_run.dir.join(crate::store::run::ENVIRONMENT))?;
    let model = &selected_cfg.config.model;
    let training = &selected_cfg.config.training;
    let bounded = manifest.data.task != Task::Regression && m != "log_loss";
    let higher = selection.higher_is_better;

    let columns: Vec<Row> = summary.columns.iter().map(|c| {
        let detail = match &c.numeric {
            Some(n) => format!("{} to {} (median {})", sig(n.min, 4), sig(n.max, 4), sig(n.median, 4)),
            None => {
                let top: Vec<String> = c.top_levels.iter().take(3).map(|l| format!("{} ({})", md(&l.level), l.count)).collect();
                format!("{} levels; most frequent {}", c.distinct, top.join(", "))
            }
        };
        Row { cells: vec![md(&c.name), c.role.clone(), if c.categorical { format!("{} (categorical)", c.kind) } else { c.kind.clone() }, format!("{} ({}%)", c.missing, fixed(100.0 * c.missing_share, 1)), detail] }
    }).collect();
    let target_rows: Vec<Row> = summary.target.classes.iter().map(|l| Row { cells: vec![md(&l.level), l.count.to_string(), format!("{}%", fixed(100.0 * l.count as f64 / summary.rows.max(1) as f64, 1))] })
        .chain(summary.target.distribution.iter().map(|d| Row { cells: vec!["distribution".into(), format!("min {} / median {} / max {}", sig(d.min, 4), sig(d.median, 4), sig(d.max, 4)), format!("mean {} sd {}", sig(d.mean, 4), sig(d.std, 4))] }))
        .collect();

    let metrics_shown: Vec<&str> = match manifest.data.task {
        Task::Binary => vec!["roc_auc", "pr_auc", "log_loss", "brier", "ece", "accuracy"],
        Task::Multiclass => vec!["log_loss", "accuracy", "balanced_accuracy", "roc_auc", "ece"],
        Task::Regression => vec!["rmse", "mae", "r2"],
    };
    let mut validation_header = vec!["configuration".to_string(), "parameters".into(), "seeds".into()];
    validation_header.extend(metrics_shown.iter().map(|s| s.to_string()));
    validation_header.push(format!("train − validation {m}"));
    let validation_rows: Vec<Row> = selection.configs.iter().map(|c| {
        let mut label = md(&config_label(&c.overrides, c.baseline));
        if c.config_id == selection.selected_config {
            label = format!("**{label}** (selected)");
        }
        let mut cells = vec![label, c.parameter_count.to_string(), if c.runs_failed > 0 { format!("{} ({} failed)", c.runs_completed, c.runs_failed) } else { c.runs_completed.to_string() }];
        cells.extend(metrics_shown.iter().map(|k| spread_text(c.validation.get(*k))));
        cells.push(spread_text(c.gap.as_ref()));
        Row { cells }
    }).collect();
    let baseline_line = match (selected_summary.and_then(|s| s.validation.get(m)), baseline_summary.and_then(|s| s.validation.get(m))) {
        (Some(n), Some(b)) => format!("Validation {m}: network {} against linear baseline {} (difference {}).", spread_text(Some(n)), spread_text(Some(b)), fixed(n.mean - b.mean, 4)),
        _ => "No linear baseline was trained (selection.baseline = false).".into(),
    };
    let t = &selection.test;
    let test_rows: Vec<Row> = t.metrics.iter().filter_map(|(k, v)| {
        let v = (*v)?;
        let ci = t.intervals.get(k).map(|i| format!("[{}, {}]", fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_else(|| "–".into());
        Some(Row { cells: vec![k.clone(), fixed(v, 4), ci, spread_text(t.across_seeds.get(k))] })
    }).collect();
    let headline = match (t.metrics.get(m).copied().flatten(), t.intervals.get(m)) {
        (Some(v), Some(i)) => format!("test {m} {} (95% bootstrap interval {} to {}, {} resamples)", fixed(v, 4), fixed(i.lower, 4), fixed(i.upper, 4), i.resamples),
        (Some(v), None) => format!("test {m} {}", fixed(v, 4)),
        _ => format!("test {m} undefined"),
    };
    let labels: Vec<String> = record.class_labels.iter().map(|l| md(l)).collect();
    let confusion_rows: Vec<Row> = t.confusion.iter().enumerate().map(|(i, r)| Row { cells: std::iter::once(labels.get(i).cloned().unwrap_or_default()).chain(r.iter().map(|n| n.to_string())).collect() }).collect();
    let class_rows: Vec<Row> = t.per_class.iter().enumerate().map(|(i, c)| Row { cells: vec![labels.get(i).cloned().unwrap_or_default(), fixed(c.precision, 4), fixed(c.recall, 4), fixed(c.f1, 4), c.support.to_string()] }).collect();
    let group_rows: Vec<Row> = t.groups.iter().map(|g| Row { cells: vec![md(&g.column), md(&g.level), g.rows.to_string(), g.metrics.get(m).copied().flatten().map(|v| fixed(v, 4)).unwrap_or_else(|| "undefined".into())] }).collect();

    let regularizer_rows = vec![
        Row { cells: vec!["weight decay (decoupled)".into(), sig(training.weight_decay, 4)] },
        Row { cells: vec!["L2 penalty (coupled)".into(), sig(training.l2_penalty, 4)] },
        Row { cells: vec!["dropout".into(), sig(model.dropout, 4)] },
        Row { cells: vec!["input noise (sd, standardised units)".into(), sig(model.input_noise, 4)] },
        Row { cells: vec!["batch normalisation".into(), if model.batch_norm { "on".into() } else { "off".into() }] },
        Row { cells: vec!["residual connections".into(), if model.residual { "on".into() } else { "off".into() }] },
        Row { cells: vec!["early stopping".into(), if training.early_stopping.enabled { format!("on: patience {} epochs on validation loss, min delta {}; best epoch restored", training.early_stopping.patience, sig(training.early_stopping.min_delta, 3)) } else { "off".into() }] },
        Row { cells: vec!["gradient clipping".into(), if training.clip_norm > 0.0 { format!("global norm {}", sig(training.clip_norm, 3)) } else { "off".into() }] },
    ];
    let grid_rows: Vec<Row> = manifest.sweep.grid.iter().map(|(k, v)| Row { cells: vec![md(k), v.iter().map(value_text).collect::<Vec<_>>().join(", "), selected_cfg.overrides.get(k).map(value_text).unwrap_or_default()] }).collect();

    let missing: Vec<(String, f64)> = summary.columns.iter().filter(|c| c.role == "feature").map(|c| (c.name.clone(), c.missing_share)).collect();
    let rare: Vec<(String, usize)> = summary.columns.iter().filter(|c| c.role == "feature" && c.categorical).map(|c| (c.name.clone(), c.rare_levels)).collect();
    let grid_positions: Vec<(String, String, usize, usize)> = manifest.sweep.grid.iter().filter_map(|(k, values)| {
        let chosen = selected_cfg.overrides.get(k)?;
        let mut keys: Vec<f64> = values.iter().map(order_key).collect::<Option<Vec<_>>>()?;
        let mine = order_key(chosen)?;
        keys.sort_by(f64::total_cmp);
        keys.dedup();
        let position = keys.iter().position(|x| *x == mine)?;
        Some((k.clone(), chosen.to_string(), position, keys.len()))
    }).collect();
    let minority = summary.target.classes.iter().min_by_key(|c| c.count).map(|c| (c.level.clone(), c.count, c.count as f64 / summary.rows.max(1) as f64));
    let orient = |x: f64| if higher { x } else { -x };
    let evidence = Evidence {
        train_rows: record.split_rows[0],
        parameter_count: selected_run.record.parameter_count,
        minority,
        metric: m.clone(),
        selected: selected_summary.and_then(|s| s.validation.get(m)).map(|s| (s.mean, s.sd)),
        baseline: baseline_summary.and_then(|s| s.validation.get(m)).map(|s| (s.mean, s.sd)),
        gap: selected_summary.and_then(|s| s.gap.as_ref()).map(|g| orient(g.mean)),
        bounded_metric: bounded,
        test_ece: t.metrics.get("ece").copied().flatten(),
        missing,
        rare_levels: rare,
        grid: grid_positions,
        failed_runs: selection.configs.iter().map(|c| c.runs_failed).sum(),
    };
    let limitations: Vec<Limitation> = derive(&evidence).into_iter().map(|l| Limitation { finding: md(&l.finding), threshold: md(&l.threshold), ..l }).collect();
    let figs = figures(&manifest, &selection, &selected_runs)?;
    let text = |v: &Value| v.as_str().map(str::to_string);
    let context = CardContext {
        name: md(&manifest.experiment.name),
        description: md(&manifest.experiment.description),
        intended_use: md(&manifest.experiment.intended_use),
        out_of_scope: md(&manifest.experiment.out_of_scope),
        owner: md(&manifest.experiment.owner),
        affects_people: manifest.experiment.affects_people,
        group_columns: manifest.data.group_columns.iter().map(|g| md(g)).collect(),
        task: manifest.data.task.as_str().into(),
        target: md(&manifest.data.target),
        positive_label: if manifest.data.task == Task::Binary { record.class_labels.get(1).map(|l| md(l)).unwrap_or_default() } else { String::new() },
        trained_at: text(&timing["trained_at"]).unwrap_or_else(|| "unknown".into()),
        fingerprint: record.fingerprint.clone(),
        tool_version: record.tool_version.clone(),
        manifest_sha256: record.manifest_sha256.clone(),
        results_digest: String::new(),
        manifest_path: md(&record.manifest_path),
        data_path: md(&record.data.path),
        data_resolved_path: md(&record.data.resolved_path),
        data_outside: record.data.outside_manifest_folder,
        data_file_sha256: record.data.file_sha256.clone(),
        data_content_sha256: record.data.content_sha256.clone(),
        data_bytes: record.data.bytes,
        rows: summary.rows,
        split: record.split_rows,
        split_seed: manifest.split.seed,
        stratified: manifest.split.stratify && manifest.data.task != Task::Regression,
        column_rows: columns,
        target_rows,
        data_warnings: summary.warnings.iter().map(|w| md(w)).collect(),
        selected_label: md(&config_label(&selected_cfg.overrides, false)),
        selected_run: selection.selected_run.clone(),
        selected_seed: t.seed,
        metric: m.clone(),
        direction: if higher { "higher is better".into() } else { "lower is better".into() },
        headline,
        architecture: {
            let encoded = read_json::<crate::data::prep::Preprocessor>(&layout.preprocessor())?.width();
            let hidden = if model.hidden.is_empty() { "no hidden layer".to_string() } else { format!("hidden widths {}", model.hidden.iter().map(|w| w.to_string()).collect::<Vec<_>>().join(", ")) };
            format!("{} features encoded as {encoded} inputs → {hidden} → {} output(s)", record.features.len(), selected_run.record.head.outputs())
        },
        activation: model.activation.as_str().into(),
        residual: model.residual,
        batch_norm: model.batch_norm,
        parameter_count: selected_run.record.parameter_count,
        rows_per_parameter: sig(record.split_rows[0] as f64 / selected_run.record.parameter_count.max(1) as f64, 3),
        regularizer_rows,
        optimizer: format!("{} (learning rate {}{}{})", training.optimizer.as_str(), sig(training.learning_rate, 4),
            if training.optimizer == crate::manifest::Optimizer::Sgd { format!(", momentum {}{}", sig(training.momentum, 3), if training.nesterov { ", Nesterov" } else { "" }) } else { format!(", betas {} / {}", sig(training.beta1, 4), sig(training.beta2, 4)) },
            format_args!(", batch size {}", training.batch_size)),
        schedule: format!("{:?} with {} warm-up epoch(s)", training.schedule, training.warmup_epochs).to_lowercase(),
        epochs: format!("at most {}; best epoch per seed {}", training.epochs, spread_text(selected_summary.and_then(|s| s.best_epoch.as_ref()))),
        grid_rows,
        seeds: manifest.sweep.seeds.iter().map(|s| s.to_string()).collect::<Vec<_>>().join(", "),
        validation_header,
        validation_rows,
        baseline_line,
        test_rows,
        test_rows_count: t.rows,
        confusion_header: std::iter::once("true \\\\ predicted".to_string()).chain(labels.iter().cloned()).collect(),
        confusion_rows,
        class_rows,
        group_rows,
        figures: figs.iter().map(|(f, a, _)| Figure { file: f.clone(), alt: md(a) }).collect(),
        limitations,
        environment: vec![
            Row { cells: vec!["tabcard".into(), md(&format!("{} (source commit {})", environment.tool_version, environment.tool_commit))] },
            Row { cells: vec!["numerics".into(), md(&format!("kernels {}, dispatch level {} (the level changes speed, never a bit)", environment.kernel_version, environment.kernel_level))] },
            Row { cells: vec!["numerical kernels".into(), md(&format!("{}; model definition and stored form: candle {}", environment.kernel_features, environment.candle_version))] },
            Row { cells: vec!["target".into(), md(&format!("{} {}", environment.target_arch, environment.target_os))] },
            Row { cells: vec!["CPU features".into(), md(&environment.cpu_features.join(" "))] },
            Row { cells: vec!["C library".into(), md(&environment.libc)] },
            Row { cells: vec!["threads per run".into(), environment.threads_per_run.to_string()] },
        ],
        git_commit: text(&timing["git_commit"]).unwrap_or_else(|| "not in a git repository".into()),
        git_dirty: match timing["git_dirty"].as_bool() { Some(true) => "yes".into(), Some(false) => "no".into(), None => "unknown".into() },
        jobs: timing["jobs"].as_u64().map(|j| j.to_string()).unwrap_or_else(|| "unknown".into()),
        results_folder: md(&layout.root.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default()),
        train_command: md(&format!("tabcard train {}", record.manifest_path)),
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
    context.results_digest = results_digest.to_string();
    let ctx = tera::Context::from_serialize(&context).map_err(|e| Error::Engine(format!("card context: {e}")))?;
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
