//! The one reader of a stored results folder. Commands never read a results file, nor check a
//! folder against its integrity list, except through here (`tests/layering.rs` checks it):
//! - [`Sealed::open`]: a finished folder, every file checked against `integrity.sha256`, its
//!   layout version, and the stored manifest against the hash `experiment.json` records; then
//!   typed reads of its parts ([`Sealed::open_evidence`]: the same where only rendered files may
//!   differ, for `card`, which renders them anew);
//! - [`StoredResults::read`]: everything the card is made from, without the integrity check (the
//!   card is rendered while `train` seals the folder);
//! - [`Folder::inspect`]: what `train` finds before it writes (nothing, a folder in progress, a
//!   sealed folder) and [`Listing::read`], a folder as `list` shows it.

use std::path::Path;

use crate::data::prep::Preprocessor;
use crate::data::summary::DataSummary;
use crate::error::{Error, Result};
use crate::experiment::plan::Plan;
use crate::experiment::{ExperimentRecord, Location};
use crate::manifest::Manifest;
use crate::numerics::NumericsFingerprint;
use crate::selection::Selection;
use crate::store::run::{read_run, StoredRun};
use crate::store::timing::TimingRecord;
use crate::store::{integrity, read_json, Layout};

/// The stored canonical manifest, checked against the SHA-256 `experiment.json` records for it.
fn checked_manifest_text(layout: &Layout, record: &ExperimentRecord) -> Result<String> {
    let text = std::fs::read_to_string(layout.manifest()).map_err(|e| Error::io(layout.manifest(), "read", e))?;
    let hash = crate::fingerprint::sha256_hex(text.as_bytes());
    if hash != record.manifest_sha256 {
        return Err(Error::store(
            layout.manifest(),
            format!("was edited after training: its SHA-256 is {hash}, experiment.json records {}", record.manifest_sha256),
        ));
    }
    Ok(text)
}

/// The experiment record with its location: from `location.json` (layout 4), else from the
/// fields layouts 2 and 3 kept in `experiment.json` itself.
fn read_record(layout: &Layout) -> Result<ExperimentRecord> {
    let value: serde_json::Value = read_json(&layout.experiment())?;
    let mut record: ExperimentRecord =
        serde_json::from_value(value.clone()).map_err(|e| Error::store(layout.experiment(), format!("unreadable: {e}")))?;
    record.location = if layout.location().exists() { read_json(&layout.location())? } else { Location::from_old_record(&value) };
    Ok(record)
}

/// A finished results folder that matched its integrity list when it was opened.
pub(crate) struct Sealed {
    pub layout: Layout,
    /// The results digest (SHA-256 of the evidence lines of the list).
    pub digest: String,
    pub record: ExperimentRecord,
    /// The results layout version the folder was written in.
    pub layout_version: u32,
    manifest_text: String,
}

impl Sealed {
    /// Opens `folder` after checking every file against its list, its layout version and the
    /// stored manifest's hash.
    pub(crate) fn open(folder: &Path) -> Result<Self> {
        Self::opened(Layout::new(folder), false)
    }

    /// As [`Sealed::open`], where the card and figures may differ from the list (they are about
    /// to be rendered anew); temporaries of interrupted writes are removed first.
    pub(crate) fn open_evidence(folder: &Path) -> Result<Self> {
        let layout = Layout::new(folder);
        integrity::remove_temporaries(&layout.root);
        Self::opened(layout, true)
    }

    fn opened(layout: Layout, rendered_may_differ: bool) -> Result<Self> {
        let digest = if rendered_may_differ { layout.check_sealed_evidence()? } else { layout.check_sealed()? };
        let record = read_record(&layout)?;
        let manifest_text = checked_manifest_text(&layout, &record)?;
        let layout_version = layout.check_format()?.version;
        Ok(Sealed { layout, digest, record, layout_version, manifest_text })
    }

    pub(crate) fn manifest(&self) -> Result<Manifest> {
        serde_json::from_str(&self.manifest_text).map_err(|e| Error::store(self.layout.manifest(), format!("unreadable: {e}")))
    }

    pub(crate) fn selection(&self) -> Result<Selection> {
        read_json(&self.layout.selection())
    }

    pub(crate) fn summary(&self) -> Result<DataSummary> {
        read_json(&self.layout.data_summary())
    }

    pub(crate) fn plan(&self) -> Result<Plan> {
        read_json(&self.layout.plan())
    }

    pub(crate) fn preprocessor(&self) -> Result<Preprocessor> {
        read_json(&self.layout.preprocessor())
    }

    /// One stored run; an error when it has no folder.
    pub(crate) fn run(&self, id: &str) -> Result<StoredRun> {
        read_run(&self.layout, id)?.ok_or_else(|| Error::store(self.layout.run(id), "is missing"))
    }

    /// The stored runs of `plan`, in plan order.
    pub(crate) fn runs(&self, plan: &Plan) -> Result<Vec<StoredRun>> {
        crate::store::run::read_runs(&self.layout, plan)
    }

    /// The environment a run recorded, if it can be read.
    pub(crate) fn environment(&self, run_id: &str) -> Option<NumericsFingerprint> {
        read_json(&self.layout.run(run_id).join(crate::store::run::ENVIRONMENT)).ok()
    }

    /// `importance.json`, when the folder has one (layout 5).
    pub(crate) fn importance(&self) -> Result<Option<crate::analysis::importance::ImportanceReport>> {
        read_optional(&self.layout.importance())
    }

    /// `sensitivity.json`, when the folder has one (layout 6).
    pub(crate) fn sensitivity(&self) -> Result<Option<crate::analysis::sensitivity::SensitivityReport>> {
        read_optional(&self.layout.sensitivity())
    }

    /// `profile.json`, when the folder has one (layout 7).
    pub(crate) fn profile(&self) -> Result<Option<crate::analysis::profile::ReferenceProfile>> {
        read_optional(&self.layout.profile())
    }

    /// `fairness.json`, when the folder has one (layout 5 with group columns).
    pub(crate) fn fairness(&self) -> Result<Option<crate::analysis::fairness::FairnessReport>> {
        read_optional(&self.layout.fairness())
    }

    /// The stored test-split predictions; `None` in folders before layout 4, which have none.
    pub(crate) fn test_predictions_text(&self) -> Result<Option<String>> {
        let path = self.layout.test_predictions();
        if !path.exists() {
            return Ok(None);
        }
        std::fs::read_to_string(&path).map(Some).map_err(|e| Error::io(&path, "read", e))
    }

    /// The attached records of `kind` (`monitoring`, `reviews`), each checked against its own
    /// list first, in name order; records of other kinds are not read (a review that does not
    /// hold never stops a reader of monitoring records).
    pub(crate) fn attached(&self, kind: &str) -> Result<Vec<crate::store::attached::AttachedRecord>> {
        crate::store::attached::check_each(&self.layout.root, kind)?.into_iter().map(|(_, record)| record).collect()
    }

    /// One JSON file of an attached record (checked by [`Sealed::attached`]).
    pub(crate) fn attached_json<T: serde::de::DeserializeOwned>(
        &self,
        record: &crate::store::attached::AttachedRecord,
        file: &str,
    ) -> Result<T> {
        read_json(&self.layout.root.join(&record.kind).join(&record.name).join(file))
    }

    /// The card as stored.
    pub(crate) fn card_text(&self) -> Result<String> {
        std::fs::read_to_string(self.layout.card()).map_err(|e| Error::io(self.layout.card(), "read", e))
    }
}

/// Who trained the experiment in the folder at `root`, as its files say: the timing record's
/// `trained_by` (git's `user.email` or the login name at training, from tabcard 0.10) and the
/// stored manifest's `[experiment] trained_by`, where given. A file that cannot be read names
/// nobody here: its integrity is `verify`'s to judge.
pub(crate) fn trainers(root: &Path) -> Vec<String> {
    let layout = Layout::new(root);
    let timing = crate::store::timing::read(&layout.timing()).ok().flatten().and_then(|t| t.trained_by);
    let manifest = read_json::<Manifest>(&layout.manifest()).ok();
    let named = manifest.map(|m| m.experiment.trained_by.trim().to_string()).filter(|t| !t.is_empty());
    timing.into_iter().chain(named).collect()
}

/// The experiment fingerprint `experiment.json` of the folder at `root` records, if it can be read.
pub(crate) fn fingerprint_of(root: &Path) -> Option<String> {
    read_record(&Layout::new(root)).ok().map(|r| r.fingerprint)
}

/// Everything the card is made from, read once from a results folder (layout version and the
/// stored manifest's hash checked; the integrity list is the caller's: see the module's doc).
pub(crate) struct StoredResults {
    /// The results layout version the folder was written in.
    pub layout_version: u32,
    pub manifest: Manifest,
    pub record: ExperimentRecord,
    pub summary: DataSummary,
    pub plan: Plan,
    pub selection: Selection,
    /// `None` for a folder whose timing record is missing (it is outside the integrity list).
    pub timing: Option<TimingRecord>,
    pub preprocessor: Preprocessor,
    pub runs: Vec<StoredRun>,
    /// `fairness.json` (layout 5 with group columns).
    pub fairness: Option<crate::analysis::fairness::FairnessReport>,
    /// `importance.json` (layout 5).
    pub importance: Option<crate::analysis::importance::ImportanceReport>,
    /// `sensitivity.json` (layout 6).
    pub sensitivity: Option<crate::analysis::sensitivity::SensitivityReport>,
}

impl StoredResults {
    pub(crate) fn read(layout: &Layout) -> Result<Self> {
        let layout_version = layout.check_format()?.version;
        let record = read_record(layout)?;
        let text = checked_manifest_text(layout, &record)?;
        let manifest: Manifest = serde_json::from_str(&text).map_err(|e| Error::store(layout.manifest(), format!("unreadable: {e}")))?;
        let plan: Plan = read_json(&layout.plan())?;
        let runs = crate::store::run::read_runs(layout, &plan)?;
        Ok(StoredResults {
            layout_version,
            manifest,
            record,
            summary: read_json(&layout.data_summary())?,
            selection: read_json(&layout.selection())?,
            timing: crate::store::timing::read(&layout.timing())?,
            preprocessor: read_json(&layout.preprocessor())?,
            fairness: read_optional(&layout.fairness())?,
            importance: read_optional(&layout.importance())?,
            sensitivity: read_optional(&layout.sensitivity())?,
            plan,
            runs,
        })
    }
}

/// What `train` finds where an experiment's folder goes.
pub(crate) enum Folder {
    /// No experiment files yet (or an interrupted first write: `format.json` comes last).
    New,
    /// The experiment files are whole, the sweep is not sealed yet.
    InProgress,
    /// Sealed, and every file matched the list when it was opened: nothing of it is written again.
    Sealed(Box<Sealed>),
}

impl Folder {
    /// Inspects `layout` for the experiment whose canonical manifest is `canonical`: an existing
    /// folder must hold that manifest, and a sealed one must match its integrity list (it is
    /// handed back opened, so `train` reads its selection without hashing it again).
    pub(crate) fn inspect(layout: &Layout, canonical: &str) -> Result<Folder> {
        if !layout.format().exists() {
            return Ok(Folder::New);
        }
        layout.check_format()?;
        let stored = std::fs::read_to_string(layout.manifest()).map_err(|e| Error::io(layout.manifest(), "read", e))?;
        if stored != canonical {
            return Err(Error::store(
                layout.manifest(),
                "differs from the experiment it is named after (the stored manifest was edited); move the folder aside to retrain",
            ));
        }
        if !Self::is_sealed(layout) {
            return Ok(Folder::InProgress);
        }
        Ok(Folder::Sealed(Box::new(Sealed::opened(layout.clone(), false)?)))
    }

    /// Whether the folder has its integrity list (its selection and card are written).
    pub(crate) fn is_sealed(layout: &Layout) -> bool {
        layout.selection().exists() && layout.root.join(integrity::FILE).exists()
    }

    /// The stored runs of `plan` (while `train` selects: the folder is not sealed yet).
    pub(crate) fn stored_runs(layout: &Layout, plan: &Plan) -> Result<Vec<StoredRun>> {
        crate::store::run::read_runs(layout, plan)
    }
}

/// The run ids of `plan` already stored in the folder `folder` (which need not exist), and those
/// a `train` would add.
pub(crate) fn stored_and_new_runs(folder: &Path, plan: &Plan) -> (Vec<String>, Vec<String>) {
    let layout = Layout::new(folder);
    plan.runs.iter().map(|r| r.id.clone()).partition(|id| crate::store::run::is_run_folder(&layout.run(id)))
}

/// A folder as `list` shows it: its record, and its selection and timing only when it matches
/// its integrity list.
pub(crate) struct Listing {
    pub record: ExperimentRecord,
    /// Whether the folder has its integrity list.
    pub sealed: bool,
    /// Why the folder fails its integrity check, when it does.
    pub integrity_error: Option<String>,
    pub selection: Option<Selection>,
    pub timing: Option<TimingRecord>,
    /// The card as stored, only when the folder matches its lists.
    pub card: Option<String>,
}

impl Listing {
    pub(crate) fn read(folder: &Path) -> Result<Self> {
        let layout = Layout::new(folder);
        layout.check_format()?;
        let record = read_record(&layout)?;
        // Nothing from a folder is shown as fact before it matches its integrity list.
        let sealed = layout.root.join(integrity::FILE).exists();
        let integrity_error = if sealed { integrity::check(&layout.root).err().map(|e| e.to_string()) } else { None };
        let selection = if layout.selection().exists() && integrity_error.is_none() { Some(read_json(&layout.selection())?) } else { None };
        let timing = crate::store::timing::read(&layout.timing()).ok().flatten();
        let card = if sealed && integrity_error.is_none() { std::fs::read_to_string(layout.card()).ok() } else { None };
        Ok(Listing { record, sealed, integrity_error, selection, timing, card })
    }

    /// Whether `path` is an experiment's results folder (it holds `format.json`).
    pub(crate) fn is_results_folder(path: &Path) -> bool {
        Layout::new(path).format().exists()
    }
}

/// A results folder found by the manifest it was trained from.
pub(crate) struct FolderOfManifest {
    pub folder: String,
    pub data_content_sha256: String,
    pub tool_version: String,
}

/// The results folders under `results_root` trained from the manifest whose canonical SHA-256 is
/// `manifest_sha256`, sorted by folder name: where an experiment's results went when its data
/// changed since, or another tabcard version trained it.
pub(crate) fn folders_of_manifest(results_root: &Path, manifest_sha256: &str) -> Vec<FolderOfManifest> {
    let Ok(entries) = std::fs::read_dir(results_root) else { return Vec::new() };
    let mut found: Vec<FolderOfManifest> = entries
        .flatten()
        .filter(|e| e.path().is_dir())
        .filter_map(|e| {
            let record = read_record(&Layout::new(e.path())).ok()?;
            (record.manifest_sha256 == manifest_sha256).then(|| FolderOfManifest {
                folder: e.file_name().to_string_lossy().into_owned(),
                data_content_sha256: record.data.content_sha256,
                tool_version: record.tool_version,
            })
        })
        .collect();
    found.sort_by(|a, b| a.folder.cmp(&b.folder));
    found
}

/// An evidence file a folder holds only from some layout on, or only for some experiments: `None`
/// when it is absent.
fn read_optional<T: serde::de::DeserializeOwned>(path: &std::path::Path) -> Result<Option<T>> {
    if path.exists() {
        Ok(Some(read_json(path)?))
    } else {
        Ok(None)
    }
}
