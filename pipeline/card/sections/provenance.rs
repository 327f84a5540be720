//! The provenance section: fingerprints, results digest, the manifest, the environment, the
//! timing record (checked before it is read), and the commands that verify and retrain.

use serde::Serialize;

use crate::numerics::NumericsFingerprint;
use crate::results::StoredResults;
use crate::store::Layout;
use crate::text::{code_span, markdown_line as md_line, markdown_safe as md};

use crate::card::cells::Row;

#[derive(Serialize)]
pub(crate) struct Provenance {
    pub(crate) trained_at: String,
    pub(crate) fingerprint: String,
    pub(crate) tool_version: String,
    manifest_sha256: String,
    /// SHA-256 of the evidence lines of `integrity.sha256` ([`crate::store::integrity`]).
    pub(crate) results_digest: String,
    /// What the digest covers and how to check it, in the folder's layout.
    pub(crate) digest_note: String,
    pub(crate) manifest_path: String,
    pub(crate) environment: Vec<Row>,
    pub(crate) git_commit: String,
    pub(crate) git_dirty: String,
    /// How git saw the manifest and the data file, each by itself (empty before tabcard 0.6).
    pub(crate) git_files: String,
    pub(crate) jobs: String,
    pub(crate) results_folder: String,
    pub(crate) verify_command: String,
    pub(crate) train_command: String,
    /// Layout 7 on: how new batches are set against the stored reference population.
    pub(crate) monitor_command: Option<String>,
}

pub(crate) fn provenance(st: &StoredResults, layout: &Layout, environment: &NumericsFingerprint) -> Provenance {
    let timing = st.timing.as_ref();
    let folder = layout.root.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    Provenance {
        trained_at: md(&timing.map(|t| t.trained_at.clone()).unwrap_or_else(|| "unknown".into())),
        fingerprint: st.record.fingerprint.clone(),
        tool_version: st.record.tool_version.clone(),
        manifest_sha256: st.record.manifest_sha256.clone(),
        results_digest: String::new(),
        digest_note: digest_note(crate::store::integrity::folder_version(&layout.root)).into(),
        manifest_path: code_span(&st.record.location.manifest_path),
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
                    "tabcard's own portable matrix kernels, version {}: each output of a matrix product is one fused multiply-add chain in a fixed order, computed whole by one thread, at every dispatch level, so neither the level nor the thread count changes a bit (README, \"What is reproducible, and where\"); model definition and stored form: candle {}",
                    environment.kernel_version, environment.candle_version
                )),
            ]),
            Row::of(["target".into(), md(&format!("{} {}", environment.target_arch, environment.target_os))]),
            Row::of(["CPU features".into(), md_line(&environment.cpu_features.join(" "))]),
            Row::of(["C library".into(), md(&environment.libc)]),
        ],
        git_commit: code_span(&timing.and_then(|t| t.git_commit.clone()).unwrap_or_else(|| "not in a git repository".into())),
        git_dirty: match timing.and_then(|t| t.git_dirty) {
            Some(true) => "yes".into(),
            Some(false) => "no".into(),
            None => "unknown".into(),
        },
        git_files: match (st.record.location.manifest_git, st.record.location.data_git) {
            (Some(manifest), Some(data)) => format!("manifest file {}; data file {}", manifest.describe(), data.describe()),
            _ => String::new(),
        },
        jobs: timing.map(|t| t.jobs.to_string()).unwrap_or_else(|| "unknown".into()),
        verify_command: code_span(&format!("tabcard verify {folder}")),
        monitor_command: (st.layout_version >= crate::analysis::profile::PROFILE_FROM)
            .then(|| code_span(&format!("tabcard monitor {folder} <batch.parquet>"))),
        results_folder: code_span(&folder),
        train_command: code_span(&format!("tabcard train {} --results <empty folder>", st.record.location.manifest_path)),
    }
}

/// What the results digest covers and how a reader checks it, for a folder of layout `version`.
pub(crate) fn digest_note(version: u32) -> &'static str {
    if version >= 4 {
        "SHA-256 of `integrity.sha256`, the list of the evidence (every stored file but the records of where and on what it was \
         trained, timing, this card and its figures), so the same experiment has the same digest in any checkout and on any machine; \
         `sha256sum integrity.sha256` gives it, and `sha256sum -c integrity.sha256 records.sha256` in the results folder checks every file"
    } else {
        "SHA-256 of the evidence lines of `integrity.sha256` (every stored file but timing, this card and its figures); check with \
         `sha256sum -c integrity.sha256` in the results folder"
    }
}
