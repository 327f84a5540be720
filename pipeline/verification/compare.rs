//! What a rerun is compared on: a retrained run against its stored record (outcome, every weight
//! tensor's SHA-256, every history row, every metric), and the rerun environment against the
//! recorded one.

use std::collections::BTreeSet;

use crate::error::Result;
use crate::numerics::NumericsFingerprint;
use crate::store::run::StoredRun;
use crate::store::weights::tensor_digests;
use crate::sweep::TrainedRun;

/// Every difference between a retrained run and its stored record, empty when it reproduced.
pub(crate) fn compare_run(stored: &StoredRun, fresh: &TrainedRun) -> Result<Vec<String>> {
    let mut diffs = Vec::new();
    let r = &stored.record;
    if r.outcome != fresh.record.outcome {
        diffs.push(format!("outcome: stored {}, rerun {}", r.outcome.describe(), fresh.record.outcome.describe()));
    }
    if !r.tensor_sha256.is_empty() {
        let on_disk = tensor_digests(&stored.tensors()?);
        if let Some(name) = r.tensor_sha256.keys().find(|k| on_disk.get(*k) != r.tensor_sha256.get(*k)) {
            diffs.push(format!(
                "stored weights file: tensor `{name}` does not match its recorded SHA-256 (weights.safetensors was altered)"
            ));
        }
    }
    let names: BTreeSet<&String> = r.tensor_sha256.keys().chain(fresh.record.tensor_sha256.keys()).collect();
    if let Some(name) = names.into_iter().find(|k| r.tensor_sha256.get(*k) != fresh.record.tensor_sha256.get(*k)) {
        diffs.push(format!(
            "first differing tensor `{name}`: recorded SHA-256 {}, rerun {}",
            r.tensor_sha256.get(name).map(String::as_str).unwrap_or("(absent)"),
            fresh.record.tensor_sha256.get(name).map(String::as_str).unwrap_or("(absent)")
        ));
    }
    let history = stored.history()?;
    let first = history
        .iter()
        .zip(&fresh.history)
        .position(|(a, b)| a != b)
        .or_else(|| (history.len() != fresh.history.len()).then(|| history.len().min(fresh.history.len())));
    if let Some(i) = first {
        diffs.push(format!("history differs from epoch {} on ({} stored epochs, {} rerun)", i + 1, history.len(), fresh.history.len()));
    }
    for (split, a, b) in [("training", &r.train, &fresh.record.train), ("validation", &r.validation, &fresh.record.validation)] {
        if let Some((k, v)) = a.iter().find(|(k, v)| b.get(*k) != Some(v)) {
            diffs.push(format!("{split} {k}: stored {v:?}, rerun {:?}", b.get(k).copied().flatten()));
        }
    }
    Ok(diffs)
}

/// Where the recording and the rerun environment differ, each line marked by whether it bears on
/// the promise (tool and kernel versions) or is for the record only (CPU, dispatch level, libc).
pub(crate) fn environment_differences(recorded: &NumericsFingerprint, now: &NumericsFingerprint) -> Vec<String> {
    let mut out = Vec::new();
    let mut field = |name: &str, a: &str, b: &str, decides: bool| {
        if a != b {
            let role = if decides { "changes what is promised" } else { "for the record: changes no bit" };
            out.push(format!("{name}: recorded {a}, now {b} ({role})"));
        }
    };
    field("tool version", &recorded.tool_version, &now.tool_version, true);
    field("kernel version", &recorded.kernel_version, &now.kernel_version, true);
    field("tool source commit", &recorded.tool_commit, &now.tool_commit, false);
    field("candle version", &recorded.candle_version, &now.candle_version, false);
    field("dispatch level", &recorded.kernel_level, &now.kernel_level, false);
    field("target", &format!("{} {}", recorded.target_arch, recorded.target_os), &format!("{} {}", now.target_arch, now.target_os), false);
    field("CPU features", &recorded.cpu_features.join(" "), &now.cpu_features.join(" "), false);
    field("C library", &recorded.libc, &now.libc, false);
    out
}
