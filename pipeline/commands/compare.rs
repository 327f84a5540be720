//! `tabcard compare <A> <B>`: what changed between two results folders: the resolved manifest key
//! by key, the data fingerprints, and the selected configurations' metrics with their seed spread,
//! so a reader sees whether a difference is within noise.

use serde_json::Value;
use std::collections::BTreeMap;
use std::fmt::Write;
use std::path::Path;

use crate::error::Result;
use crate::experiment::ExperimentRecord;
use crate::format::fixed;
use crate::selection::{ConfigSummary, Selection};
use crate::store::{read_json, Layout};
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

struct Side {
    record: ExperimentRecord,
    manifest: BTreeMap<String, Value>,
    selection: Selection,
}

fn load(folder: &Path) -> Result<Side> {
    let layout = Layout::new(folder);
    layout.check_sealed()?;
    let manifest: Value = read_json(&layout.manifest())?;
    let mut flat = BTreeMap::new();
    flatten("", &manifest, &mut flat);
    Ok(Side { record: read_json(&layout.experiment())?, manifest: flat, selection: read_json(&layout.selection())? })
}

fn selected(s: &Selection) -> Option<&ConfigSummary> {
    s.configs.iter().find(|c| c.config_id == s.selected_config)
}

pub fn run(a: &Path, b: &Path) -> Result<String> {
    let (sa, sb) = (load(a)?, load(b)?);
    let mut out = String::new();
    let _ = writeln!(out, "A  {} ({})", a.display(), &sa.record.fingerprint[..16]);
    let _ = writeln!(out, "B  {} ({})", b.display(), &sb.record.fingerprint[..16]);
    let _ = writeln!(out, "\nmanifest changes (resolved, defaults filled):");
    let keys: std::collections::BTreeSet<&String> = sa.manifest.keys().chain(sb.manifest.keys()).collect();
    let mut changes = 0;
    for k in keys {
        let (va, vb) = (sa.manifest.get(k), sb.manifest.get(k));
        if va != vb {
            changes += 1;
            let show = |v: Option<&Value>| v.map(|v| terminal_safe(&v.to_string())).unwrap_or_else(|| "(absent)".into());
            let _ = writeln!(out, "  {k}: {} -> {}", show(va), show(vb));
        }
    }
    if changes == 0 {
        let _ = writeln!(out, "  none");
    }
    let _ = writeln!(out, "\ndata:");
    for (name, x, y) in [
        ("file SHA-256", &sa.record.data.file_sha256, &sb.record.data.file_sha256),
        ("content SHA-256", &sa.record.data.content_sha256, &sb.record.data.content_sha256),
    ] {
        if x == y {
            let _ = writeln!(out, "  {name} same: {x}");
        } else {
            let _ = writeln!(out, "  {name} CHANGED: {x} -> {y}");
        }
    }
    if sa.record.task != sb.record.task {
        let _ = writeln!(
            out,
            "\nmetrics: not compared: A is a {} task and B a {} task, so metrics of the same name (or the training objective) measure different things",
            sa.record.task.as_str(),
            sb.record.task.as_str()
        );
        return Ok(out);
    }
    let _ = writeln!(out, "\nselected configurations, validation (mean ± sd across seeds) and test:");
    let (ca, cb) = (selected(&sa.selection), selected(&sb.selection));
    let metrics: std::collections::BTreeSet<&String> = ca
        .map(|c| c.validation.keys().collect::<Vec<_>>())
        .unwrap_or_default()
        .into_iter()
        .chain(cb.map(|c| c.validation.keys().collect::<Vec<_>>()).unwrap_or_default())
        .collect();
    let _ = writeln!(out, "  {:<18} {:>18} {:>18} {:>9}  judgement", "metric", "A", "B", "B - A");
    for m in metrics {
        let (Some(x), Some(y)) = (ca.and_then(|c| c.validation.get(m)), cb.and_then(|c| c.validation.get(m))) else { continue };
        let delta = y.mean - x.mean;
        let noise = 2.0 * (x.sd * x.sd + y.sd * y.sd).sqrt();
        let judgement = if delta.abs() <= noise { "within noise (|delta| <= 2 combined sd)" } else { "beyond seed noise" };
        let _ = writeln!(
            out,
            "  {:<18} {:>18} {:>18} {:>9}  {judgement}",
            m,
            format!("{} ± {}", fixed(x.mean, 4), fixed(x.sd, 4)),
            format!("{} ± {}", fixed(y.mean, 4), fixed(y.sd, 4)),
            fixed(delta, 4)
        );
    }
    let m = &sa.selection.metric;
    if let (Some(x), Some(y)) = (sa.selection.test.metrics.get(m).copied().flatten(), sb.selection.test.metrics.get(m).copied().flatten()) {
        let _ = writeln!(out, "  test {m}: A {} B {} (delta {})", fixed(x, 4), fixed(y, 4), fixed(y - x, 4));
    }
    Ok(out)
}
