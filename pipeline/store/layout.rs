//! The results layout: the files of one experiment's folder ([`Layout`]), the layout version a
//! folder records ([`FormatRecord`]) and the check every reader runs before trusting a folder.

use std::path::PathBuf;

use super::files::read_json;
use super::integrity;
use crate::error::{Error, Result};

/// The version of the results layout this tool writes. Version 2 added `integrity.sha256` and
/// the results digest; version 3 renamed a run's `metrics.json`, `config.json` and `run.json` to
/// `result.json`, `settings.json` and `checksums.json`. Version 4 keeps the evidence apart from
/// the records of place and machine (`location.json`, each run's `environment.json`, listed in
/// `records.sha256` with the card and figures, outside the results digest), stores the test
/// split's predictions (`test-predictions.csv`) and the declared decision, and admits attached
/// records (`reviews/`, `monitoring/`). Version 5 added calibration, `fairness.json` and
/// `importance.json`; version 6 `sensitivity.json`; version 7 adds `profile.json`, the reference
/// population `monitor` compares batches with. Version 8 names runs by what decides their bits
/// (`experiment.json`'s `run_inputs_sha256` with each run's settings and seed) rather than by the
/// experiment fingerprint, so a run folder may be a copy of another experiment's identical run,
/// and its heavier analyses (importance, sensitivity) use at most 10,000 test rows, a seeded
/// sample above that (`analysis/sample.rs`). Version 9 chooses the threshold reference row from
/// at most 100,000 training rows, a seeded sample above that (`analysis/sample.rs`). Version 10
/// scores each bootstrap resample's rows in row order rather than in the order drawn
/// (`metrics::bootstrap::ResampleOrder`): the same resamples, with the last bits of their sums
/// (log loss, Brier, ECE, the regression metrics) moved.
pub const FORMAT_VERSION: u32 = 10;

/// The layout versions this tool reads (a version-2 folder under its own file names).
pub const READABLE_VERSIONS: &[u32] = &[2, 3, 4, 5, 6, 7, 8, 9, 10];

/// Identifies a results folder and the tool that wrote it.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct FormatRecord {
    pub format: String,
    pub version: u32,
    pub tool_version: String,
}

impl FormatRecord {
    pub fn current() -> Self {
        FormatRecord { format: "tabcard-results".into(), version: FORMAT_VERSION, tool_version: env!("CARGO_PKG_VERSION").into() }
    }
}

/// The files of one experiment's results folder.
#[derive(Debug, Clone)]
pub struct Layout {
    pub root: PathBuf,
}

impl Layout {
    pub fn new(root: impl Into<PathBuf>) -> Self {
        Layout { root: root.into() }
    }
    pub fn format(&self) -> PathBuf {
        self.root.join("format.json")
    }
    pub fn manifest(&self) -> PathBuf {
        self.root.join("manifest.json")
    }
    pub fn manifest_source(&self) -> PathBuf {
        self.root.join("manifest.source.toml")
    }
    pub fn experiment(&self) -> PathBuf {
        self.root.join("experiment.json")
    }
    /// Where the experiment was trained from (layout 4; a record outside the evidence).
    pub fn location(&self) -> PathBuf {
        self.root.join(super::integrity::LOCATION)
    }
    pub fn data_summary(&self) -> PathBuf {
        self.root.join("data-summary.json")
    }
    pub fn plan(&self) -> PathBuf {
        self.root.join("plan.json")
    }
    pub fn preprocessor(&self) -> PathBuf {
        self.root.join("preprocessor.json")
    }
    pub fn selection(&self) -> PathBuf {
        self.root.join("selection.json")
    }
    /// The selected run's outputs on the test split (layout 4).
    pub fn test_predictions(&self) -> PathBuf {
        self.root.join("test-predictions.csv")
    }
    /// The disparity of the deployed decision across groups (layout 5, with group columns).
    pub fn fairness(&self) -> PathBuf {
        self.root.join("fairness.json")
    }
    /// Permutation importance of each raw feature (layout 5).
    pub fn importance(&self) -> PathBuf {
        self.root.join("importance.json")
    }
    /// Reference rows, the sensitivity table and integrated gradients of the test rows (layout 6).
    pub fn sensitivity(&self) -> PathBuf {
        self.root.join("sensitivity.json")
    }
    /// The reference population monitoring compares batches with (layout 7).
    pub fn profile(&self) -> PathBuf {
        self.root.join("profile.json")
    }
    pub fn timing(&self) -> PathBuf {
        self.root.join("timing.json")
    }
    pub fn card(&self) -> PathBuf {
        self.root.join("card.md")
    }
    pub fn figures(&self) -> PathBuf {
        self.root.join("figures")
    }
    pub fn runs(&self) -> PathBuf {
        self.root.join("runs")
    }
    pub fn run(&self, id: &str) -> PathBuf {
        self.runs().join(id)
    }

    /// Checks that the folder is a finished results folder whose every file matches its integrity
    /// list, then its format; returns the results digest. What `card`, `compare`, `predict` and
    /// `verify` call before trusting anything in it.
    pub fn check_sealed(&self) -> Result<String> {
        self.check_sealed_parts(false)
    }

    /// [`Layout::check_sealed`] where only the evidence must match (rendered files may differ):
    /// what `card` checks before it renders them anew.
    pub fn check_sealed_evidence(&self) -> Result<String> {
        self.check_sealed_parts(true)
    }

    fn check_sealed_parts(&self, rendered_may_differ: bool) -> Result<String> {
        if !self.format().exists() {
            return Err(Error::store(&self.root, "is not a tabcard results folder (no format.json)"));
        }
        if let Ok(FormatRecord { version: 1, tool_version, .. }) = read_json::<FormatRecord>(&self.format()) {
            return Err(Error::store(
                self.format(),
                format!(
                "results layout version 1, written by tabcard {tool_version} before results folders carried integrity.sha256; \
                 check it with the tabcard that wrote it (its run indexes still hold every run file's SHA-256), or retrain it with this one"
            ),
            ));
        }
        let digest = if rendered_may_differ { integrity::check_evidence(&self.root)? } else { integrity::check(&self.root)? };
        self.check_format()?;
        Ok(digest)
    }

    /// Checks that the folder was written by a tool that uses this layout.
    pub fn check_format(&self) -> Result<FormatRecord> {
        let path = self.format();
        if !path.exists() {
            return Err(Error::store(&self.root, "is not a tabcard results folder (no format.json)"));
        }
        let record: FormatRecord = read_json(&path)?;
        if record.format != "tabcard-results" {
            return Err(Error::store(&path, format!("unknown format `{}`", record.format)));
        }
        if !READABLE_VERSIONS.contains(&record.version) {
            return Err(Error::store(
                &path,
                format!(
                    "results layout version {} written by tabcard {}; this tabcard {} reads versions {READABLE_VERSIONS:?}",
                    record.version,
                    record.tool_version,
                    env!("CARGO_PKG_VERSION")
                ),
            ));
        }
        Ok(record)
    }
}
