//! `tabcard compare <A> <B>`: what differs between two experiments, each given as a results
//! folder or a manifest: the resolved manifest key by key, the data fingerprints, and, for
//! results folders of one task, the selected configurations' metrics with their seed spread (so a
//! reader sees whether a difference is within noise). For a manifest it says which of its runs
//! are already stored under the results root and which a `train` would add.

use serde_json::Value;
use std::collections::BTreeMap;
use std::fmt::Write;
use std::path::Path;

use crate::error::Result;
use crate::experiment::plan::config_label;
use crate::format::{fixed, mean_sd};
use crate::manifest::Task;
use crate::metrics::registry;
use crate::results::Sealed;
use crate::selection::{ConfigSummary, Selection};
use crate::text::terminal_safe;

fn flatten(prefix: &str, v: &Value, out: &mut BTreeMap<String, Value>) {
    match v {
        Value::Object(map) => {
            for (k, v) in map {
                let key = if prefix.is_empty() { k.clone() } else { format!("{prefix}.{k}") };
                flatten(&key, v, out);
            }
        }
        other => {
            out.insert(prefix.to_string(), other.clone());
        }
    }
}

/// One side of the comparison.
struct Side {
    fingerprint: String,
    task: Task,
    target: String,
    file_sha256: String,
    content_sha256: String,
    manifest: BTreeMap<String, Value>,
    /// Results folders only.
    selection: Option<Selection>,
    /// Manifests only: (run ids already stored, run ids a `train` would add).
    runs: Option<(Vec<String>, Vec<String>)>,
    /// Every run id of the plan, in plan order.
    run_ids: Vec<String>,
}

fn is_manifest(path: &Path) -> bool {
    crate::manifest::is_manifest_path(path)
}

fn load_folder(folder: &Path) -> Result<Side> {
    let sealed = Sealed::open(folder)?;
    let mut flat = BTreeMap::new();
    // Through the manifest type, as a manifest file is read below, so both sides show defaults alike.
    let manifest = sealed.manifest()?;
    let value = serde_json::to_value(&manifest).map_err(|e| crate::error::Error::Internal(format!("manifest as JSON: {e}")))?;
    flatten("", &value, &mut flat);
    let selection = sealed.selection()?;
    let run_ids = sealed.plan()?.runs.into_iter().map(|r| r.id).collect();
    let record = sealed.record;
    Ok(Side {
        fingerprint: record.fingerprint,
        task: record.task,
        target: manifest.data.target.clone(),
        file_sha256: record.data.file_sha256,
        content_sha256: record.data.content_sha256,
        manifest: flat,
        selection: Some(selection),
        runs: None,
        run_ids,
    })
}

fn load_manifest(path: &Path, results_root: &Path) -> Result<Side> {
    let exp = crate::experiment::open(path)?;
    let plan = crate::experiment::plan::build(&exp.manifest, &exp.run_naming())?;
    // The same resolved form a results folder stores as manifest.json.
    let value = serde_json::to_value(&exp.manifest).map_err(|e| crate::error::Error::Internal(format!("manifest as JSON: {e}")))?;
    let mut flat = BTreeMap::new();
    flatten("", &value, &mut flat);
    let (stored, new) = crate::results::stored_and_new_runs(&results_root.join(exp.short_id()), &plan);
    Ok(Side {
        fingerprint: exp.fingerprint.clone(),
        task: exp.manifest.data.task,
        target: exp.manifest.data.target.clone(),
        file_sha256: exp.data.file_sha256.clone(),
        content_sha256: exp.data.content_sha256.clone(),
        manifest: flat,
        selection: None,
        runs: Some((stored, new)),
        run_ids: plan.runs.iter().map(|r| r.id.clone()).collect(),
    })
}

fn load(path: &Path, results_root: &Path) -> Result<Side> {
    if is_manifest(path) {
        load_manifest(path, results_root)
    } else {
        load_folder(path)
    }
}

/// The runs both sides plan under the same id: the same inputs, settings and seed, so the same
/// bits, trained once and copied (from layout 8, where ids name what decides a run's bits).
fn shared_runs(a: &Side, b: &Side, out: &mut String, json: &mut serde_json::Map<String, Value>) {
    let in_b: std::collections::BTreeSet<&String> = b.run_ids.iter().collect();
    let in_a: std::collections::BTreeSet<&String> = a.run_ids.iter().collect();
    let shared: Vec<&String> = a.run_ids.iter().filter(|id| in_b.contains(id)).collect();
    let union = in_a.union(&in_b).count();
    let _ = writeln!(
        out,
        "\nruns: {} of {union} runs shared (the same id: the same inputs, settings and seed, so the same bits); {} only in A, {} only in B",
        shared.len(),
        a.run_ids.len() - shared.len(),
        b.run_ids.len() - shared.len()
    );
    json.insert("shared_runs".into(), serde_json::json!(shared));
}

fn selected(s: &Selection) -> Option<&ConfigSummary> {
    s.selected_summary()
}

pub fn run(a: &Path, b: &Path, results_root: &Path) -> Result<super::Report> {
    let (sa, sb) = (load(a, results_root)?, load(b, results_root)?);
    let mut out = String::new();
    let mut json = serde_json::Map::new();
    let _ = writeln!(out, "A  {} ({})", a.display(), &sa.fingerprint[..16]);
    let _ = writeln!(out, "B  {} ({})", b.display(), &sb.fingerprint[..16]);
    json.insert("a".into(), serde_json::json!({ "path": a.display().to_string(), "fingerprint": sa.fingerprint }));
    json.insert("b".into(), serde_json::json!({ "path": b.display().to_string(), "fingerprint": sb.fingerprint }));
    let _ = writeln!(out, "\nmanifest changes (resolved):");
    let keys: std::collections::BTreeSet<&String> = sa.manifest.keys().chain(sb.manifest.keys()).collect();
    let mut changes = Vec::new();
    for k in keys {
        let (va, vb) = (sa.manifest.get(k), sb.manifest.get(k));
        if va != vb {
            // A resolved manifest leaves out a key only when it holds its default.
            let show = |v: Option<&Value>| v.map(|v| terminal_safe(&v.to_string())).unwrap_or_else(|| "(not set: the default)".into());
            let _ = writeln!(out, "  {k}: {} -> {}", show(va), show(vb));
            changes.push(serde_json::json!({ "key": k, "a": va, "b": vb }));
        }
    }
    if changes.is_empty() {
        let _ = writeln!(out, "  none");
    }
    json.insert("manifest_changes".into(), Value::Array(changes));
    let _ = writeln!(out, "\ndata:");
    let mut data = serde_json::Map::new();
    for (name, key, x, y) in [
        ("file SHA-256", "file_sha256", &sa.file_sha256, &sb.file_sha256),
        ("content SHA-256", "content_sha256", &sa.content_sha256, &sb.content_sha256),
    ] {
        if x == y {
            let _ = writeln!(out, "  {name} same: {x}");
        } else {
            let _ = writeln!(out, "  {name} CHANGED: {x} -> {y}");
        }
        data.insert(key.into(), serde_json::json!({ "a": x, "b": y, "same": x == y }));
    }
    json.insert("data".into(), Value::Object(data));
    shared_runs(&sa, &sb, &mut out, &mut json);
    for (label, side) in [("A", &sa), ("B", &sb)] {
        if let Some((stored, new)) = &side.runs {
            let _ = writeln!(
                out,
                "\nruns of {label}: {} planned, {} already stored under {}, {} a `train` would add",
                stored.len() + new.len(),
                stored.len(),
                results_root.display(),
                new.len()
            );
            json.insert(format!("runs_{}", label.to_lowercase()), serde_json::json!({ "stored": stored, "new": new }));
        }
    }
    let (Some(sel_a), Some(sel_b)) = (&sa.selection, &sb.selection) else {
        let _ = writeln!(out, "\nmetrics: compared only between two results folders");
        return Ok(super::Report { text: out, json: Value::Object(json) });
    };
    if sa.task != sb.task {
        let _ = writeln!(
            out,
            "\nmetrics: not compared: A is a {} task and B a {} task, so metrics of the same name (or the training objective) measure different things",
            sa.task.as_str(),
            sb.task.as_str()
        );
        json.insert("metrics_not_compared".into(), Value::String(format!("tasks differ: {} and {}", sa.task.as_str(), sb.task.as_str())));
        return Ok(super::Report { text: out, json: Value::Object(json) });
    }
    // Metrics of two experiments are judged against seed noise only when they predict the same
    // target from the same table: otherwise their validation and test rows differ, and a metric
    // difference mixes the models with the data.
    let unrelated = match (sa.target == sb.target, sa.content_sha256 == sb.content_sha256) {
        (false, _) => Some(format!("A predicts `{}` and B `{}`", terminal_safe(&sa.target), terminal_safe(&sb.target))),
        (true, false) => {
            Some("A and B were trained on different data (the content SHA-256 differs), so their validation and test rows differ".into())
        }
        (true, true) => None,
    };
    let (ca, cb) = (selected(sel_a), selected(sel_b));
    let label = |c: Option<&ConfigSummary>| c.map(|c| config_label(&c.overrides, c.baseline)).unwrap_or_else(|| "-".into());
    let _ = writeln!(
        out,
        "\nselected configurations: A {} (run {}), B {} (run {})",
        label(ca),
        sel_a.selected_run,
        label(cb),
        sel_b.selected_run
    );
    json.insert("selected".into(), serde_json::json!({ "a": label(ca), "b": label(cb) }));
    if let Some(why) = &unrelated {
        let _ = writeln!(out, "metrics: shown, not judged: {why}");
        json.insert("not_judged".into(), Value::String(why.clone()));
    }
    let _ = writeln!(out, "\nvalidation (mean ± sd across seeds):");
    let metrics: std::collections::BTreeSet<&String> = ca
        .map(|c| c.validation.keys().collect::<Vec<_>>())
        .unwrap_or_default()
        .into_iter()
        .chain(cb.map(|c| c.validation.keys().collect::<Vec<_>>()).unwrap_or_default())
        .collect();
    let _ = writeln!(out, "  {:<18} {:>18} {:>18} {:>9}  judgement", "metric", "A", "B", "B - A");
    let mut rows = Vec::new();
    for m in metrics {
        let (Some(x), Some(y)) = (ca.and_then(|c| c.validation.get(m)), cb.and_then(|c| c.validation.get(m))) else { continue };
        let delta = y.mean - x.mean;
        let noise = 2.0 * (x.sd * x.sd + y.sd * y.sd).sqrt();
        let within = delta.abs() <= noise;
        let better = match registry::direction(sa.task, m) {
            Some(d) if registry::better(d, y.mean, x.mean) => "B",
            Some(_) => "A",
            None => "?",
        };
        let judgement = match (&unrelated, within) {
            (Some(_), _) => "not judged (see above)".to_string(),
            (None, true) => "within noise (|delta| <= 2 combined sd)".to_string(),
            (None, false) => format!("{better} better, beyond seed noise"),
        };
        let _ =
            writeln!(out, "  {:<18} {:>18} {:>18} {:>9}  {judgement}", m, mean_sd(x.mean, x.sd), mean_sd(y.mean, y.sd), fixed(delta, 4));
        rows.push(serde_json::json!({
            "metric": m, "a": x, "b": y, "delta": delta,
            "within_noise": unrelated.is_none().then_some(within),
            "better": (unrelated.is_none() && !within).then_some(better),
        }));
    }
    json.insert("validation".into(), Value::Array(rows));
    let m = &sel_a.metric;
    if let (Some(x), Some(y)) = (sel_a.test.metrics.get(m).copied().flatten(), sel_b.test.metrics.get(m).copied().flatten()) {
        let interval = |s: &Selection| {
            s.test
                .intervals
                .get(m)
                .map(|i| format!(" (95% bootstrap interval {} to {})", fixed(i.lower, 4), fixed(i.upper, 4)))
                .unwrap_or_default()
        };
        let _ = writeln!(
            out,
            "test {m}: A {}{}, B {}{} (B - A {})",
            fixed(x, 4),
            interval(sel_a),
            fixed(y, 4),
            interval(sel_b),
            fixed(y - x, 4)
        );
        json.insert(
            "test".into(),
            serde_json::json!({ "metric": m, "a": x, "b": y, "a_interval": sel_a.test.intervals.get(m), "b_interval": sel_b.test.intervals.get(m) }),
        );
    }
    Ok(super::Report { text: out, json: Value::Object(json) })
}
