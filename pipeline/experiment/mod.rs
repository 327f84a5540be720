//! An experiment resolved from its manifest and its data: the canonical manifest and its hash, both
//! data fingerprints, the experiment fingerprint that names everything it produces, column roles,
//! the encoded target, the data summary, the split and the preprocessing fitted on the training
//! rows. The data file stays open and is never held decoded: the first pass ([`crate::data::scan`])
//! reads it a column at a time, and the matrices are built from it later, a column at a time.

pub mod feasibility;
pub mod plan;
pub mod prepared;

use std::path::{Path, PathBuf};

use crate::data::parquet::ParquetSource;
use crate::data::prep::Preprocessor;
use crate::data::roles::{Roles, Target};
use crate::data::scan::scan;
use crate::data::split::Splits;
use crate::data::summary::DataSummary;
use crate::error::Result;
use crate::fingerprint::experiment_fingerprint;
use crate::manifest::{self, LoadedManifest, Manifest};

pub const TOOL_VERSION: &str = env!("CARGO_PKG_VERSION");

/// The data file's identity.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct DataFingerprints {
    /// The path as the manifest gives it.
    pub path: String,
    /// SHA-256 of the file's bytes.
    pub file_sha256: String,
    /// SHA-256 of the schema and values in row order, independent of the file's encoding.
    pub content_sha256: String,
    pub bytes: u64,
}

/// Where an experiment was trained from (`location.json`): it differs between a git checkout and
/// a plain copy of the same project, so from results layout 4 it is a record outside the
/// evidence; layouts 2 and 3 kept it inside `experiment.json`.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Location {
    /// The manifest's path relative to its project root (the git work tree holding it, or its own
    /// folder outside git), with `/` separators.
    pub manifest_path: String,
    /// Whether the data file lies outside that project, through `..`, an absolute path or a
    /// symlink: such a file does not travel with a checkout. No absolute path is recorded.
    pub data_outside_project: bool,
    /// The manifest's path from the results folder (`..`-relative), so `verify` finds it from
    /// any working folder, in a checkout or a plain copy (absent before tabcard 0.6).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub manifest_from_results: Option<String>,
    /// How git saw the manifest and the data file when the experiment was trained (absent
    /// before tabcard 0.6).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub manifest_git: Option<crate::provenance::GitFileState>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub data_git: Option<crate::provenance::GitFileState>,
}

impl Location {
    /// The location a layout-2 or layout-3 `experiment.json` holds (`manifest_path`, and
    /// `data.outside_project`, which tabcard 0.3 named `outside_manifest_folder`).
    pub fn from_old_record(record: &serde_json::Value) -> Location {
        let data = &record["data"];
        Location {
            manifest_path: record["manifest_path"].as_str().unwrap_or_default().to_string(),
            data_outside_project: data["outside_project"].as_bool().or_else(|| data["outside_manifest_folder"].as_bool()).unwrap_or(false),
            ..Location::default()
        }
    }
}

pub struct Experiment {
    pub manifest_path: PathBuf,
    pub manifest: Manifest,
    pub manifest_sha256: String,
    pub data_path: PathBuf,
    pub data: DataFingerprints,
    /// Whether the data file lies outside the manifest's project ([`Location`]).
    pub data_outside_project: bool,
    pub fingerprint: String,
    /// The data file, open: the matrices and the test evaluation read it again, a column at a time.
    pub source: ParquetSource,
    pub rows: usize,
    pub columns: usize,
    pub roles: Roles,
    pub target: Target,
    pub summary: DataSummary,
    pub splits: Splits,
    /// Fitted on the training rows.
    pub preprocessor: Preprocessor,
    /// Every input's bins and counts on the training rows (the monitoring profile's features),
    /// from the first pass.
    pub(crate) training_profile: Vec<crate::data::bins::BinnedColumn>,
    /// Manifest keys the grid overrides, for `check` and `train` to report.
    pub overridden_by_grid: Vec<String>,
    /// SHA-256 of the three row lists' JSON, hashed once (the lists hold every row).
    split_sha256: String,
    /// [`Experiment::run_inputs_sha256`], hashed once.
    run_inputs_sha256: String,
}

impl Experiment {
    /// The first 16 hex digits of the fingerprint: the results folder's name.
    pub fn short_id(&self) -> &str {
        &self.fingerprint[..16]
    }
}

fn outside(manifest_path: &Path, data_path: &Path) -> bool {
    match (crate::provenance::project_root(manifest_path), data_path.canonicalize()) {
        (Some(root), Ok(d)) => !d.starts_with(root),
        _ => true,
    }
}

/// Loads a manifest and its data and resolves everything the runs need.
pub fn open(manifest_path: &Path) -> Result<Experiment> {
    let loaded = manifest::load(manifest_path)?;
    open_loaded(loaded)
}

pub fn open_loaded(loaded: LoadedManifest) -> Result<Experiment> {
    let data_path = loaded.data_path();
    // A data file that is missing or not a table is a manifest problem: name the key and line.
    let problem = match std::fs::metadata(&data_path) {
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Some("no such file"),
        Ok(meta) => crate::data::parquet::not_a_table_file(&meta),
        Err(_) => None,
    };
    if let Some(problem) = problem {
        return Err(manifest::key_error(
            &loaded.path,
            "data.path",
            format!("{}: {problem}", data_path.display()),
            Some("data.path is resolved against the manifest's folder".into()),
        ));
    }
    open_with_data(loaded, data_path)
}

/// As [`open_loaded`], with the data file given explicitly (verification of stored results).
pub fn open_with_data(loaded: LoadedManifest, data_path: PathBuf) -> Result<Experiment> {
    let source = ParquetSource::open(&data_path)?;
    // Where more than one thread is allowed, the file's hash runs on a thread of its own while the
    // first pass reads the columns (each read positioned, so neither moves the other's place).
    let (file_hash, bytes, scanned) = if crate::threads::allowed() > 1 {
        let (hashed, scanned) = std::thread::scope(|scope| {
            let hashing = scope.spawn(|| source.file_sha256());
            let scanned = scan(&loaded.manifest, &source);
            (hashing.join(), scanned)
        });
        let (file_hash, bytes) = hashed.map_err(|_| crate::error::Error::Internal("the file hash stopped".into()))??;
        (file_hash, bytes, scanned?)
    } else {
        let (file_hash, bytes) = source.file_sha256()?;
        (file_hash, bytes, scan(&loaded.manifest, &source)?)
    };
    let manifest_sha256 = manifest::canonical_hash(&loaded.manifest);
    let content = scanned.content_sha256;
    let fingerprint = experiment_fingerprint(&manifest_sha256, &content, TOOL_VERSION);
    let data_outside_project = outside(&loaded.path, &data_path);
    let mut exp = Experiment {
        manifest_path: loaded.path,
        data: DataFingerprints { path: loaded.manifest.data.path.clone(), file_sha256: file_hash, content_sha256: content, bytes },
        data_outside_project,
        manifest: loaded.manifest,
        manifest_sha256,
        data_path,
        fingerprint,
        source,
        rows: scanned.rows,
        columns: scanned.columns,
        roles: scanned.roles,
        target: scanned.target,
        summary: scanned.summary,
        splits: scanned.splits,
        preprocessor: scanned.preprocessor,
        training_profile: scanned.training_profile,
        overridden_by_grid: loaded.overridden_by_grid,
        split_sha256: String::new(),
        run_inputs_sha256: String::new(),
    };
    exp.split_sha256 = crate::fingerprint::sha256_hex(serde_json::to_string(&exp.splits).unwrap_or_default().as_bytes());
    exp.run_inputs_sha256 = exp.hash_run_inputs();
    Ok(exp)
}

/// What `experiment.json` records about an experiment: evidence only, the same wherever the
/// project lies (its [`Location`] is read beside it).
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct ExperimentRecord {
    pub fingerprint: String,
    pub name: String,
    pub manifest_sha256: String,
    pub data: DataFingerprints,
    pub task: crate::manifest::Task,
    /// Class labels in index order (binary: negative, positive); empty for regression.
    pub class_labels: Vec<String>,
    pub features: Vec<crate::data::roles::Feature>,
    pub ids: Vec<String>,
    pub groups: Vec<String>,
    pub split_rows: [usize; 3],
    /// SHA-256 of the three row lists, so a rerun can show its split is the same.
    pub split_sha256: String,
    pub tool_version: String,
    /// What the run ids are derived from with each run's settings and seed, from layout 8
    /// ([`Experiment::run_inputs_sha256`]); before, the run ids came from the fingerprint.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub run_inputs_sha256: Option<String>,
    /// Where it was trained from: `location.json` from layout 4, this file's own fields before;
    /// filled in by the results reader.
    #[serde(skip)]
    pub location: Location,
}

impl Experiment {
    /// Class labels in index order (binary: negative, positive); empty for regression.
    fn class_labels(&self) -> Vec<String> {
        match &self.target {
            Target::Classes { labels, .. } => labels.clone(),
            Target::Values(_) => Vec::new(),
        }
    }

    /// Everything that decides a run's stored bits besides its settings and seed: the data's
    /// content, the target and its classes, the split's rows, the preprocessing fitted on the
    /// training rows, the head, the metric the history records, and the tool and kernel versions.
    /// Not the rest of the manifest: its name and descriptions, the analyses after training, the
    /// grid values a run does not take. Run ids derive from it, so two experiments that differ
    /// only there name the same runs the same way and share them (`store::run::adopt`).
    pub fn run_inputs_sha256(&self) -> &str {
        &self.run_inputs_sha256
    }

    /// Computes [`Experiment::run_inputs_sha256`] from the fields it covers.
    fn hash_run_inputs(&self) -> String {
        fn json(value: &impl serde::Serialize) -> String {
            serde_json::to_string(value).unwrap_or_default()
        }
        crate::fingerprint::run_inputs_digest(&[
            ("data content", self.data.content_sha256.as_bytes()),
            ("target", self.manifest.data.target.as_bytes()),
            ("class labels", json(&self.class_labels()).as_bytes()),
            ("split rows", self.split_sha256.as_bytes()),
            ("preprocessor", json(&self.preprocessor).as_bytes()),
            ("head", json(&self.head()).as_bytes()),
            ("selection metric", self.manifest.selection.metric.as_bytes()),
            ("tool version", TOOL_VERSION.as_bytes()),
            ("kernel version", crate::numerics::KERNEL_VERSION.as_bytes()),
        ])
    }

    /// How this experiment's plan names its runs: by [`Experiment::run_inputs_sha256`].
    pub fn run_naming(&self) -> plan::RunNaming {
        plan::RunNaming::Inputs(self.run_inputs_sha256.clone())
    }

    pub fn record(&self) -> ExperimentRecord {
        ExperimentRecord {
            fingerprint: self.fingerprint.clone(),
            name: self.manifest.experiment.name.clone(),
            manifest_sha256: self.manifest_sha256.clone(),
            data: self.data.clone(),
            task: self.manifest.data.task,
            class_labels: self.class_labels(),
            features: self.roles.features.clone(),
            ids: self.roles.ids.clone(),
            groups: self.roles.groups.clone(),
            split_rows: [self.splits.train.len(), self.splits.validation.len(), self.splits.test.len()],
            split_sha256: self.split_sha256.clone(),
            tool_version: TOOL_VERSION.to_string(),
            run_inputs_sha256: Some(self.run_inputs_sha256.clone()),
            // Written beside it by `train` (`location.json`), which knows the results folder.
            location: Location::default(),
        }
    }

    /// Where this experiment is trained from, its results going to the folder `results`.
    pub fn location(&self, results: &Path) -> Location {
        Location {
            manifest_path: crate::provenance::project_relative(&self.manifest_path),
            data_outside_project: self.data_outside_project,
            manifest_from_results: Some(crate::provenance::relative_path(results, &self.manifest_path)),
            manifest_git: Some(crate::provenance::git_file_state(&self.manifest_path)),
            data_git: Some(crate::provenance::git_file_state(&self.data_path)),
        }
    }

    /// Targets of the given rows, aligned with a matrix of those rows.
    pub fn labels(&self, rows: &[usize]) -> crate::training::Labels {
        match &self.target {
            Target::Classes { labels, rows: classes } => {
                crate::training::Labels::Classes { rows: rows.iter().map(|&r| classes[r]).collect(), classes: labels.len() }
            }
            Target::Values(v) => crate::training::Labels::Values(rows.iter().map(|&r| v[r]).collect()),
        }
    }

    pub fn head(&self) -> crate::training::Head {
        crate::training::Head {
            task: self.manifest.data.task,
            classes: self.target.class_count(),
            loss: self.manifest.training.loss,
            huber_delta: self.manifest.training.huber_delta,
        }
    }
}
