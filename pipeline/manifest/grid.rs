//! The sweep grid: which keys it may vary, applying one grid point to the base settings, and the
//! cartesian product of all grid values in a fixed order.

use serde_json::Value;
use std::collections::BTreeMap;

use super::locate::{nearest, KeyPath};
use super::schema::{Manifest, ModelSpec, TrainingSpec};
use super::validate::{validate_run_settings, Problem};

/// The settings one configuration of the grid trains with.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct GridPoint {
    /// The grid keys and the values this point gives them (empty without a grid).
    pub overrides: BTreeMap<String, Value>,
    pub model: ModelSpec,
    pub training: TrainingSpec,
}

/// Every key a grid may vary: the leaves of the `model` and `training` sections.
pub(crate) fn sweepable_keys() -> Vec<String> {
    fn leaves(prefix: &str, value: &Value, out: &mut Vec<String>) {
        match value {
            Value::Object(map) => {
                for (k, v) in map {
                    leaves(&format!("{prefix}.{k}"), v, out);
                }
            }
            _ => out.push(prefix.to_string()),
        }
    }
    let mut out = Vec::new();
    // Serialising the defaults cannot fail: they are plain structs of numbers, strings and lists.
    let model = serde_json::to_value(ModelSpec::default()).unwrap_or(Value::Null);
    let training = serde_json::to_value(TrainingSpec::default()).unwrap_or(Value::Null);
    leaves("model", &model, &mut out);
    leaves("training", &training, &mut out);
    out
}

fn set_path(root: &mut Value, dotted: &str, value: Value) -> bool {
    let mut current = root;
    let segments: Vec<&str> = dotted.split('.').collect();
    let Some((last, parents)) = segments.split_last() else { return false };
    for seg in parents {
        match current.get_mut(*seg) {
            Some(next) => current = next,
            None => return false,
        }
    }
    match current.as_object_mut() {
        Some(map) if map.contains_key(*last) => {
            map.insert(last.to_string(), value);
            true
        }
        _ => false,
    }
}

fn get_path<'a>(root: &'a Value, dotted: &str) -> Option<&'a Value> {
    dotted.split('.').try_fold(root, |v, seg| v.get(seg))
}

/// The base settings with `overrides` applied, or a message saying why a value does not fit.
pub(crate) fn apply(base: &Manifest, overrides: &BTreeMap<String, Value>) -> Result<(ModelSpec, TrainingSpec), String> {
    let mut root = serde_json::json!({
        "model": serde_json::to_value(&base.model).map_err(|e| e.to_string())?,
        "training": serde_json::to_value(&base.training).map_err(|e| e.to_string())?,
    });
    for (key, value) in overrides {
        if !set_path(&mut root, key, value.clone()) {
            return Err(format!("`{key}` is not a model or training setting"));
        }
    }
    let model: ModelSpec = serde_json::from_value(root["model"].clone()).map_err(|e| e.to_string())?;
    let training: TrainingSpec = serde_json::from_value(root["training"].clone()).map_err(|e| e.to_string())?;
    Ok((model, training))
}

fn grid_problem(key: &str, index: Option<usize>, message: String, hint: Option<String>) -> Problem {
    Problem { key: KeyPath(vec!["sweep".into(), "grid".into(), key.into()]), index, message, hint }
}

/// Checks grid keys and each value on its own, and rewrites each value in its canonical form (the
/// form it takes once applied, so `0` and `0.0` for a float setting are the same grid value).
pub(crate) fn normalise(manifest: &mut Manifest) -> Vec<Problem> {
    let keys = sweepable_keys();
    let mut problems = Vec::new();
    let task = manifest.data.task;
    let mut normalised = BTreeMap::new();
    for (key, values) in &manifest.sweep.grid {
        if !keys.iter().any(|k| k == key) {
            let hint = nearest(key, keys.iter().map(String::as_str))
                .map(|k| format!("did you mean `{k}`?"))
                .or_else(|| Some("grid keys are dotted model or training settings, e.g. \"model.dropout\"".into()));
            problems.push(grid_problem(key, None, format!("`{key}` is not a setting a grid can vary"), hint));
            continue;
        }
        if values.is_empty() {
            problems.push(grid_problem(key, None, "has no values: the grid would expand to zero runs".into(), None));
            continue;
        }
        let mut canonical = Vec::with_capacity(values.len());
        for (i, value) in values.iter().enumerate() {
            let single = BTreeMap::from([(key.clone(), value.clone())]);
            match apply(manifest, &single) {
                Err(message) => problems.push(grid_problem(key, Some(i), format!("value {value}: {message}"), None)),
                Ok((model, training)) => {
                    let own: Vec<Problem> =
                        validate_run_settings(task, &model, &training).into_iter().filter(|p| p.key.to_string() == *key).collect();
                    if let Some(p) = own.into_iter().next() {
                        problems.push(grid_problem(key, Some(i), format!("value {value}: {}", p.message), p.hint));
                    }
                    let root = serde_json::json!({ "model": model, "training": training });
                    canonical.push(get_path(&root, key).cloned().unwrap_or(Value::Null));
                }
            }
        }
        let mut seen = Vec::new();
        for (i, v) in canonical.iter().enumerate() {
            if seen.contains(&v) {
                problems.push(grid_problem(key, Some(i), format!("value {v} is listed twice"), None));
            }
            seen.push(v);
        }
        normalised.insert(key.clone(), canonical);
    }
    if problems.is_empty() {
        manifest.sweep.grid = normalised;
    }
    problems
}

/// The number of grid points (1 without a grid), saturating instead of overflowing.
pub(crate) fn point_count(manifest: &Manifest) -> usize {
    manifest.sweep.grid.values().fold(1usize, |n, v| n.saturating_mul(v.len()))
}

/// The cartesian product of the grid, last key varying fastest, each point validated as a whole.
pub(crate) fn expand(manifest: &Manifest) -> Result<Vec<GridPoint>, Problem> {
    let keys: Vec<&String> = manifest.sweep.grid.keys().collect();
    let lists: Vec<&Vec<Value>> = manifest.sweep.grid.values().collect();
    let total = point_count(manifest);
    let mut points = Vec::with_capacity(total);
    for flat in 0..total {
        let mut rest = flat;
        let mut overrides = BTreeMap::new();
        for (k, list) in keys.iter().zip(&lists).rev() {
            overrides.insert((*k).clone(), list[rest % list.len()].clone());
            rest /= list.len();
        }
        let (model, training) = apply(manifest, &overrides).map_err(|m| grid_problem(keys[0], None, m, None))?;
        if let Some(p) = validate_run_settings(manifest.data.task, &model, &training).into_iter().next() {
            let combo: Vec<String> = overrides.iter().map(|(k, v)| format!("{k} = {v}")).collect();
            return Err(Problem {
                key: KeyPath(vec!["sweep".into(), "grid".into()]),
                index: None,
                message: format!("the combination {{{}}} is invalid: {}: {}", combo.join(", "), p.key, p.message),
                hint: p.hint,
            });
        }
        points.push(GridPoint { overrides, model, training });
    }
    Ok(points)
}
/// Keys the manifest sets in their own section that `[sweep.grid]` also sweeps: the grid's values
/// are the ones trained, so the section's value changes nothing. One sentence per key.
pub(crate) fn overridden_keys(source: &str, manifest: &Manifest) -> Vec<String> {
    let Ok(document) = source.parse::<toml::Table>() else { return Vec::new() };
    manifest
        .sweep
        .grid
        .iter()
        .filter_map(|(key, values)| {
            let mut node: Option<&toml::Value> = None;
            let mut table = &document;
            for (i, part) in key.split('.').enumerate() {
                let v = table.get(part)?;
                if i + 1 < key.split('.').count() {
                    table = v.as_table()?;
                } else {
                    node = Some(v);
                }
            }
            let set = node?;
            let swept: Vec<String> = values.iter().map(|v| v.to_string()).collect();
            Some(format!("{key} = {set} is overridden by the grid, which trains [{}]; remove one of the two", swept.join(", ")))
        })
        .collect()
}
