//! `tabcard scaffold <data.parquet>`: a commented starter manifest written from the data itself:
//! every column with its detected type, missing share and distinct count and a suggested role,
//! the target (a column named like one, else the last that can be one, and why), a split column
//! set aside and shown as `[split] column`, the task inferred from the target, and every section
//! with its documented defaults (taken from the schema's own `Default`s, so they cannot drift).
//! The result passes `check` unchanged.

use std::fmt::Write;
use std::path::{Path, PathBuf};

use crate::data::parquet::read_table;
use crate::data::roles::{Role, MAX_MAGNITUDE};
use crate::data::table::{Column, ColumnValues, Table};
use crate::error::{Error, Result};
use crate::manifest::{EarlyStopping, ModelSpec, SelectionSpec, SplitSpec, SweepSpec, Task, TrainingSpec};
use crate::metrics::registry;

pub struct ScaffoldOptions {
    pub target: Option<String>,
    pub out: Option<PathBuf>,
    pub force: bool,
    /// Without `--out`: the file standard output is redirected to, when the caller can tell
    /// (`tabcard scaffold data.parquet > experiments/x.toml`), so the data path is relative to it.
    pub stdout_file: Option<PathBuf>,
}

/// Column names that usually hold what a table is made to predict (compared in lower case; also
/// any name ending in `_target`, `_label` or `_outcome`).
const TARGET_NAMES: &[&str] =
    &["target", "label", "y", "outcome", "class", "response", "diagnosis", "species", "churn", "survived", "fraud", "default", "defaulted"];

/// Values of a column that assigns rows to splits (compared in lower case).
const SPLIT_WORDS: &[&str] = &["train", "training", "valid", "validation", "val", "dev", "test", "testing", "holdout"];

fn named_like_a_target(name: &str) -> bool {
    let lower = name.to_ascii_lowercase();
    TARGET_NAMES.contains(&lower.as_str()) || ["_target", "_label", "_outcome"].iter().any(|s| lower.ends_with(s))
}

/// The levels of a text column whose every value is a split word and which holds at least two
/// of them: a split assignment, never a target or a feature.
fn split_levels(col: &Column) -> Option<Vec<String>> {
    let ColumnValues::Text { .. } = col.values else { return None };
    let mut levels = std::collections::BTreeSet::new();
    for r in 0..col.len() {
        if let Some(l) = col.label(r) {
            if !SPLIT_WORDS.contains(&l.to_ascii_lowercase().as_str()) {
                return None;
            }
            levels.insert(l);
        }
    }
    (levels.len() >= 2).then(|| levels.into_iter().collect())
}

/// The target when `--target` is not given, and why: a column named like a target, else the last
/// column that can be one (not a split assignment, an identifier, constant or all null).
fn choose_target(table: &Table) -> Option<(String, String)> {
    let usable = |c: &&Column| {
        let d = distinct(c);
        split_levels(c).is_none()
            && c.null_count() < table.rows
            && d > 1
            && !(d == table.rows && table.rows > 20 && !matches!(c.values, ColumnValues::Float(_) | ColumnValues::Float32(_)))
    };
    if let Some(c) = table.columns.iter().filter(usable).find(|c| named_like_a_target(&c.name)) {
        return Some((
            c.name.clone(),
            "chosen because its name says it is what the table predicts; pass --target to choose another".into(),
        ));
    }
    table.columns.iter().rev().find(usable).map(|c| {
        (c.name.clone(), "the last column that can be a target (no column is named like one); pass --target to choose another".into())
    })
}

struct Profile {
    name: String,
    kind: &'static str,
    missing: f64,
    distinct: usize,
    /// The role suggested (target, feature, id, or not used: the manifest's `drop`).
    role: Role,
    why: String,
}

fn distinct(col: &Column) -> usize {
    let mut seen = std::collections::HashSet::new();
    for r in 0..col.len() {
        if let Some(l) = col.label(r) {
            seen.insert(l);
        }
    }
    seen.len()
}

fn profile(col: &Column, rows: usize, target: &str) -> Profile {
    let nulls = col.null_count();
    let d = distinct(col);
    let (role, why) = if col.name == target {
        (Role::Target, "the column to predict".to_string())
    } else if let Some(levels) = split_levels(col) {
        (Role::NotUsed, format!("looks like a split assignment ({}): see `column` under [split]", levels.join(", ")))
    } else if nulls == rows {
        (Role::NotUsed, "every value is null".into())
    } else if d <= 1 {
        (Role::NotUsed, "constant: carries no information".into())
    } else if matches!(col.values, ColumnValues::Float(_) | ColumnValues::Float32(_))
        && (0..col.len()).filter(|&r| col.is_valid(r)).filter_map(|r| col.number(r)).any(|x| !x.is_finite() || x.abs() > MAX_MAGNITUDE)
    {
        (Role::NotUsed, "holds NaN, infinite or out-of-range values; store missing values as nulls and rescale".into())
    } else if d == rows && rows > 20 && matches!(col.values, ColumnValues::Int(_) | ColumnValues::Text { .. }) {
        (Role::Id, "unique per row, like an identifier".into())
    } else if col.is_text() {
        (Role::Feature, "categorical (text)".into())
    } else if matches!(col.values, ColumnValues::Int(_)) && d <= 10 {
        (Role::Feature, format!("numeric; {d} values: add it to `categorical` if they are codes, not amounts"))
    } else {
        (Role::Feature, "numeric".into())
    };
    Profile {
        name: col.name.clone(),
        kind: col.kind_name(),
        missing: if rows == 0 { 0.0 } else { nulls as f64 / rows as f64 },
        distinct: d,
        role,
        why,
    }
}

/// The task a target column suggests: two values make a binary task; text, booleans and
/// integers with at most 20 values a multiclass one; other numbers regression.
fn task_for(col: &Column, distinct: usize) -> Task {
    match (&col.values, distinct) {
        (_, 2) => Task::Binary,
        (ColumnValues::Text { .. } | ColumnValues::Bool(_), _) => Task::Multiclass,
        (ColumnValues::Int(_), d) if d <= 20 => Task::Multiclass,
        _ => Task::Regression,
    }
}

/// `to` relative to the folder `from_dir`, with `/` separators (both made absolute first).
fn relative(from_dir: &Path, to: &Path) -> String {
    crate::provenance::relative_path(from_dir, to)
}

/// Data-derived text for a TOML comment: control characters (a newline would end the comment
/// and start a live key; a NUL is not valid TOML) and bidirectional overrides become visible
/// escapes, so the text can never leave its comment.
fn comment_safe(s: &str) -> String {
    crate::text::terminal_safe(s)
}

fn toml_string(s: &str) -> String {
    toml::Value::String(s.to_string()).to_string()
}

fn toml_list(items: &[String]) -> String {
    format!("[{}]", items.iter().map(|s| toml_string(s)).collect::<Vec<_>>().join(", "))
}

/// The defaults of one section as `key = value` lines, each with its comment, in schema order.
fn section<T: serde::Serialize>(out: &mut String, title: &str, defaults: &T, comments: &[(&str, &str)], skip: &[&str]) -> Result<()> {
    let table = toml::Table::try_from(defaults).map_err(|e| Error::Internal(format!("default [{title}] as TOML: {e}")))?;
    let _ = writeln!(out, "\n[{title}]");
    for (key, value) in &table {
        if skip.contains(&key.as_str()) || value.is_table() {
            continue;
        }
        let comment = comments.iter().find(|(k, _)| k == key).map(|(_, c)| format!("  # {c}")).unwrap_or_default();
        let _ = writeln!(out, "{key} = {value}{comment}");
    }
    Ok(())
}

/// The manifest text for `data` (written to `out` when given; the data path is relative to it).
pub fn manifest_text(data: &Path, table: &Table, options: &ScaffoldOptions) -> Result<String> {
    let (target, target_why) = match &options.target {
        Some(t) => {
            if table.column(t).is_none() {
                let hint = crate::manifest::locate::nearest(t, table.columns.iter().map(|c| c.name.as_str()))
                    .map(|n| format!(" (did you mean `{n}`?)"))
                    .unwrap_or_default();
                return Err(Error::data(data, Some(t), format!("named by --target but not in the file{hint}")));
            }
            (t.clone(), "given by --target".to_string())
        }
        None => choose_target(table).ok_or_else(|| Error::data(data, None, "has no column that can be a target"))?,
    };
    let profiles: Vec<Profile> = table.columns.iter().map(|c| profile(c, table.rows, &target)).collect();
    let target_profile =
        profiles.iter().find(|p| p.role == Role::Target).ok_or_else(|| Error::Internal("the target has no profile".into()))?;
    let target_col = table.column(&target).ok_or_else(|| Error::Internal("the target vanished".into()))?;
    let task = task_for(target_col, target_profile.distinct);
    let manifest_file = options.out.as_ref().or(options.stdout_file.as_ref());
    let folder = manifest_file.and_then(|o| o.parent()).filter(|p| !p.as_os_str().is_empty()).unwrap_or(Path::new("."));
    let data_path = relative(folder, data);
    let path_note = if manifest_file.is_some() {
        "relative to this manifest".to_string()
    } else {
        "relative to the folder scaffold ran in: move it with the manifest, or use --out, which makes it relative to the file".to_string()
    };
    let stem = data.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_else(|| "experiment".into());
    let names = |role: Role| -> Vec<String> { profiles.iter().filter(|p| p.role == role).map(|p| p.name.clone()).collect() };

    let mut out = String::new();
    let _ = writeln!(
        out,
        "# Starter manifest written by `tabcard scaffold` for {} ({} rows, {} columns).",
        comment_safe(&data.display().to_string()),
        table.rows,
        table.columns.len()
    );
    let _ = writeln!(out, "# Every key shows its default. Edit what you need, then run `tabcard check` on this file.");
    let _ = writeln!(out, "# The suggested roles below come from the data alone: confirm each before training.");
    let _ = writeln!(out, "\n[experiment]");
    let _ = writeln!(out, "name = {}  # the results folder is named by the experiment's fingerprint, not by this", toml_string(&stem));
    for key in
        ["description", "intended_use", "out_of_scope", "owner", "trained_by", "data_period", "population", "model_name", "model_version"]
    {
        let _ = writeln!(out, "{key} = \"\"");
    }
    let _ = writeln!(
        out,
        "known_limitations = \"\"  # what the team knows that no rule can see (how rows were selected, what the target leaves out)"
    );
    let _ = writeln!(out, "monitoring_plan = \"\"  # which batches are monitored, how often, who reads the records, what an act triggers");
    let _ = writeln!(out, "# replaces = \"<fingerprint>\"  # the experiment fingerprint of the model this one replaces");
    let _ =
        writeln!(out, "affects_people = true  # true adds the cautions for decisions about people (credit, insurance, health) to the card");

    let _ = writeln!(out, "\n[data]");
    let _ = writeln!(out, "path = {}  # {path_note}", toml_string(&data_path));
    let _ = writeln!(
        out,
        "target = {}  # {}, {} distinct values; {}",
        toml_string(&target),
        target_profile.kind,
        target_profile.distinct,
        comment_safe(&target_why)
    );
    let _ = writeln!(out, "task = \"{}\"  # binary | multiclass | regression (suggested from the target)", task.as_str());
    let _ = writeln!(out, "# Columns: detected type, missing share, distinct values -> suggested role");
    for p in &profiles {
        // The manifest's word for a column left out is its `drop` list.
        let role = if p.role == Role::NotUsed { "drop" } else { p.role.as_str() };
        let _ = writeln!(
            out,
            "#   {:<28} {:<8} {:>6.1}% {:>8} -> {role}: {}",
            comment_safe(&p.name),
            p.kind,
            100.0 * p.missing,
            p.distinct,
            p.why
        );
    }
    let _ = writeln!(out, "ids = {}  # never features; carried into predictions", toml_list(&names(Role::Id)));
    let _ = writeln!(out, "drop = {}", toml_list(&names(Role::NotUsed)));
    let _ = writeln!(out, "categorical = []  # numeric columns to treat as categories (text columns always are)");
    let _ = writeln!(out, "features = []  # empty: every column not named as target, id, group or dropped");
    let _ = writeln!(out, "group_columns = []  # columns describing groups of people: per-group test results, never features");
    if task == Task::Binary {
        let _ = writeln!(out, "# positive_label = \"...\"  # which of the two target values is the positive class (default: the larger)");
    }

    let split = SplitSpec::default();
    section(&mut out, "split", &split, &[("stratify", "keep class shares equal across splits (classification)")], &[])?;
    match table.columns.iter().find_map(|c| split_levels(c).map(|levels| (c, levels))) {
        Some((col, levels)) => {
            let pick = |words: &[&str]| -> Vec<String> {
                levels.iter().filter(|l| words.contains(&l.to_ascii_lowercase().as_str())).cloned().collect()
            };
            let _ = writeln!(
                out,
                "# This table carries its own split in {}: to use it, remove validation, test and seed above and set",
                comment_safe(&toml_string(&col.name))
            );
            let _ = writeln!(out, "# column = {}", comment_safe(&toml_string(&col.name)));
            let _ = writeln!(
                out,
                "# [split.labels] train = {}, validation = {}, test = {}",
                comment_safe(&toml_list(&pick(&["train", "training"]))),
                comment_safe(&toml_list(&pick(&["valid", "validation", "val", "dev"]))),
                comment_safe(&toml_list(&pick(&["test", "testing", "holdout"])))
            );
        }
        None => {
            let _ = writeln!(out, "# column = \"period\"  # take the split from a column (values train / validation / test) instead");
        }
    }
    let _ = writeln!(out, "# group = \"customer_id\"  # keep every row of one value in one split");

    section(
        &mut out,
        "model",
        &ModelSpec::default(),
        &[
            ("hidden", "widths of the hidden layers"),
            ("activation", "relu | sigmoid | tanh | gelu | identity"),
            ("residual", "hidden layers after the first become x + f(x); needs equal widths"),
            ("dropout", "probability of dropping a hidden unit while training"),
            ("input_noise", "sd of Gaussian noise on the standardised inputs while training"),
        ],
        &[],
    )?;
    let training = TrainingSpec::default();
    let regression_only: &[&str] = if task == Task::Regression { &[] } else { &["loss", "huber_delta"] };
    section(
        &mut out,
        "training",
        &training,
        &[
            ("optimizer", "sgd | adam | adamw"),
            ("weight_decay", "decoupled weight decay"),
            ("l2_penalty", "coupled L2 penalty added to the loss"),
            ("momentum", "sgd only"),
            ("beta1", "adam and adamw"),
            ("schedule", "constant | step | cosine"),
            ("clip_norm", "global gradient-norm clipping; 0 turns it off"),
            ("loss", "regression: mse | huber"),
        ],
        regression_only,
    )?;
    section(
        &mut out,
        "training.early_stopping",
        &EarlyStopping::default(),
        &[("patience", "epochs without improvement of the validation loss")],
        &[],
    )?;
    let selection = SelectionSpec::default();
    let _ = writeln!(out, "\n[selection]");
    let _ = writeln!(out, "metric = \"{}\"  # one of {}", registry::default_selection_metric(task), registry::names(task).join(", "));
    let _ = writeln!(out, "baseline = {}  # also train a linear model on the same seeds", selection.baseline);
    let _ = writeln!(out, "bootstrap = {}  # resamples for the test-metric intervals", selection.bootstrap);
    let _ = writeln!(
        out,
        "rule = \"{}\"  # best | one_standard_error (the smallest configuration within one standard error of the best)",
        selection.rule.as_str()
    );
    if task == Task::Binary {
        let _ = writeln!(out, "\n[decision]  # the decision the probability feeds");
        let _ = writeln!(out, "# favourable = \"...\"  # the target value favourable to the person a row describes");
        let _ = writeln!(
            out,
            "threshold = \"youden_j_on_validation\"  # | fixed (with fixed_threshold) | expected_cost (with cost_false_positive, cost_false_negative)"
        );
    }
    let _ = writeln!(out, "\n[calibration]  # fitted on the validation rows after selection; no trained bit moves");
    if task == Task::Regression {
        let _ =
            writeln!(out, "coverage = {}  # of the split conformal prediction interval predict writes", crate::manifest::DEFAULT_COVERAGE);
    } else {
        let methods = if task == Task::Binary { "none | temperature | platt | isotonic" } else { "none | temperature" };
        let _ = writeln!(out, "method = \"none\"  # {methods}: how the probabilities are recalibrated");
    }
    let sweep = SweepSpec::default();
    let _ = writeln!(out, "\n[sweep]");
    let _ = writeln!(out, "seeds = {:?}  # every configuration is trained once per seed", sweep.seeds);
    let _ = writeln!(out, "max_runs = {}  # refuse a plan with more runs", sweep.max_runs);
    let _ = writeln!(out, "\n[sweep.grid]  # dotted keys of [model] and [training]; the plan is their product");
    let _ = writeln!(out, "# \"model.dropout\" = [0.0, 0.2]");
    let _ = writeln!(out, "# \"training.weight_decay\" = [0.0, 0.0001]");
    Ok(out)
}

pub fn run(data: &Path, options: &ScaffoldOptions) -> Result<String> {
    if let Some(out) = &options.out {
        crate::store::check_output_path("--out", "the manifest", out, &[data], options.force)?;
    }
    let table = read_table(data)?;
    let text = manifest_text(data, &table, options)?;
    match &options.out {
        Some(out) => {
            crate::store::write_atomic(out, text.as_bytes())?;
            Ok(format!("wrote {}; next: tabcard check {}\n", out.display(), out.display()))
        }
        None => Ok(text),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn relative_paths_climb_and_descend() {
        assert_eq!(relative(Path::new("/a/b/experiments"), Path::new("/a/b/data/x.parquet")), "../data/x.parquet");
        assert_eq!(relative(Path::new("/a/b"), Path::new("/a/b/x.parquet")), "x.parquet");
    }
}
