//! Verification: rerun an experiment from what its results folder records and say, as a typed
//! [`Verification`], what reproduced. The folder is checked against its integrity list first (a
//! tampered file is named and nothing is retrained), then the data and the manifest; the runs
//! are retrained and compared bit for bit, the selection and test metrics re-derived from the
//! stored runs, the card re-rendered, the results digest compared with the ledger's, and the
//! environment with the one recorded, because that is the first question an auditor asks.
//! `commands/verify.rs` prints the result and records the verdict.

mod compare;

use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::experiment::plan::Plan;
use crate::experiment::plan::RunNaming;
use crate::experiment::prepared::Prepared;
use crate::experiment::{open, open_with_data, Location};
use crate::fingerprint::file_sha256;
use crate::manifest::LoadedManifest;
use crate::numerics::NumericsFingerprint;
use crate::results::Sealed;
use crate::selection::Selection;
use crate::store::ledger::VerificationEntry;
use crate::sweep::{train_run, Event, RunReport, SweepInputs};
use compare::{compare_run, environment_differences};

/// What to verify beyond the selected configuration, and with what.
pub(crate) struct VerifyRequest {
    /// Retrain every run, not only the selected configuration's.
    pub all: bool,
    pub jobs: usize,
    /// Use this data file instead of the recorded path (it must still match the fingerprints).
    pub data: Option<PathBuf>,
    /// The manifest the verification was asked for (`verify <manifest>`): its data path is
    /// resolved from there rather than from the recorded location.
    pub manifest: Option<PathBuf>,
}

/// The rerun environment against the recorded one.
pub(crate) enum NumericsCheck {
    /// The run records no environment to compare with.
    NotRecorded,
    Recorded {
        /// Same tool and kernel versions: identical bits are promised on any CPU.
        promised: bool,
        tool_version: String,
        kernel_version: String,
        /// One line per differing field, saying whether it bears on the promise.
        differences: Vec<String>,
    },
}

/// One retrained run.
pub(crate) struct RunCheck {
    pub id: String,
    pub seed: u64,
    pub verdict: RunVerdict,
}

pub(crate) enum RunVerdict {
    /// Weights, history and metrics reproduced bit for bit.
    Identical,
    /// Every difference found, first ones first.
    Differs(Vec<String>),
    /// The run could not be retrained or read.
    CannotVerify(String),
}

/// The stored selection against the one re-derived from the stored runs.
pub(crate) enum SelectionCheck {
    /// Matches `selection.json`, and `test-predictions.csv` when the folder has one (layout 4).
    Matches {
        test_predictions: bool,
        /// `fairness.json` re-derived too (layout 5 with group columns).
        fairness: bool,
        /// `importance.json` re-derived too (layout 5).
        importance: bool,
        /// `sensitivity.json` re-derived too (layout 6).
        sensitivity: bool,
        /// `profile.json` re-derived too (layout 7).
        profile: bool,
    },
    /// What differs.
    Differs(String),
    CannotDerive(String),
}

/// The stored card against the default rendering of the evidence.
pub(crate) enum CardCheck {
    Matches,
    /// Expected only after `card --templates` or a changed timing record; not a failure.
    DiffersFromDefault,
    CannotRender(String),
}

/// The folder's results digest against the newest ledger line recording one.
pub(crate) enum LedgerCheck {
    Matches,
    Differs { ledgered: String },
    NotRecorded,
}

/// Everything a verification found.
pub(crate) struct Verification {
    pub folder: PathBuf,
    pub fingerprint: String,
    pub data_path: PathBuf,
    pub data_file_sha256: String,
    pub data_content_sha256: String,
    pub manifest_sha256: String,
    pub numerics: NumericsCheck,
    /// Every run retrained (`true`) or the selected configuration's only.
    pub all: bool,
    /// The runs of the experiment's plan.
    pub runs_planned: usize,
    /// This tabcard and the machine verifying (architecture, OS, dispatch level).
    pub verifier: (String, String),
    pub runs: Vec<RunCheck>,
    pub selection: SelectionCheck,
    pub card: CardCheck,
    pub digest: String,
    pub ledger: LedgerCheck,
}

impl Verification {
    /// Every run reproduced, the selection re-derived, the card rendered and the digest is the
    /// ledger's.
    pub(crate) fn identical(&self) -> bool {
        self.runs.iter().all(|r| matches!(r.verdict, RunVerdict::Identical))
            && matches!(self.selection, SelectionCheck::Matches { .. })
            && !matches!(self.card, CardCheck::CannotRender(_))
            && !matches!(self.ledger, LedgerCheck::Differs { .. })
    }

    /// The project folder that holds the results folder (and the ledger).
    pub(crate) fn project_root(&self) -> &Path {
        self.folder.parent().unwrap_or(Path::new("."))
    }

    /// The line `verifications.jsonl` records for this verification.
    pub(crate) fn entry(&self) -> VerificationEntry {
        VerificationEntry {
            time: crate::provenance::now_rfc3339(),
            fingerprint: self.fingerprint.clone(),
            results: crate::store::folder_name(&self.folder),
            runs_checked: self.runs.len(),
            identical: self.identical(),
            runs_planned: Some(self.runs_planned),
            all: Some(self.all),
            tool_version: Some(self.verifier.0.clone()),
            machine: Some(self.verifier.1.clone()),
        }
    }
}

/// The results folder a verify target names: the folder itself, or a manifest's folder under the
/// results root.
pub(crate) fn results_folder(target: &Path, results_root: &Path) -> Result<PathBuf> {
    if crate::manifest::is_manifest_path(target) {
        let exp = open(target)?;
        let folder = results_root.join(exp.short_id());
        if !folder.exists() {
            let others = crate::results::folders_of_manifest(results_root, &exp.manifest_sha256);
            if others.is_empty() {
                return Err(Error::store(&folder, format!("no results for experiment {} (train it first)", exp.fingerprint)));
            }
            let listed: Vec<String> = others
                .iter()
                .map(|o| {
                    let what = if o.data_content_sha256 == exp.data.content_sha256 {
                        format!("the same data, trained by tabcard {}: verify it with that version", o.tool_version)
                    } else {
                        format!(
                            "other data (content SHA-256 {}): the data changed since; verify it with --data naming the table it was trained on",
                            o.data_content_sha256
                        )
                    };
                    format!("{} ({what})", results_root.join(&o.folder).display())
                })
                .collect();
            return Err(Error::store(
                &folder,
                format!(
                    "no results for this manifest with the data as it is now (content SHA-256 {}) and this tabcard; results \
                     for this manifest exist: {}",
                    exp.data.content_sha256,
                    listed.join("; ")
                ),
            ));
        }
        return Ok(folder);
    }
    Ok(target.to_path_buf())
}

/// Where the recorded manifest is now: at its path from the results folder (recorded from tabcard
/// 0.6 on, so a plain copy verifies from any working folder), else under the nearest folder
/// above the results folder that holds its project-relative path (results usually live inside
/// the project), else relative to the current folder.
fn locate_manifest(location: &Location, results_folder: &Path) -> PathBuf {
    if let Some(from_results) = &location.manifest_from_results {
        let candidate = lexically_normal(&results_folder.join(from_results));
        if candidate.is_file() {
            return candidate;
        }
    }
    let recorded = &location.manifest_path;
    let absolute = results_folder.canonicalize().unwrap_or_else(|_| results_folder.to_path_buf());
    let found = absolute.ancestors().map(|a| a.join(recorded)).find(|p| p.is_file());
    found.unwrap_or_else(|| PathBuf::from(recorded))
}

/// `path` with each `..` taking away the component before it, without asking the file system
/// (the results folder's path from the manifest climbs out of it that way).
fn lexically_normal(path: &Path) -> PathBuf {
    use std::path::Component;
    let mut out = PathBuf::new();
    for part in path.components() {
        match part {
            Component::ParentDir if matches!(out.components().next_back(), Some(Component::Normal(_))) => {
                out.pop();
            }
            Component::CurDir => {}
            other => out.push(other.as_os_str()),
        }
    }
    out
}

/// Verify the results folder `folder`: an error when it cannot be verified at all (tampered
/// folder, changed data or manifest), else what reproduced and what did not.
pub(crate) fn verify(folder: &Path, request: &VerifyRequest, on_event: &(dyn Fn(Event) + Sync)) -> Result<Verification> {
    let sealed = Sealed::open(folder)?;
    let (layout, digest, record) = (&sealed.layout, sealed.digest.clone(), &sealed.record);
    let manifest = sealed.manifest()?;
    let manifest_path = match &request.manifest {
        Some(given) => given.clone(),
        None => locate_manifest(&record.location, &layout.root),
    };
    let data_path = match &request.data {
        Some(p) => p.clone(),
        None => manifest_path.parent().unwrap_or(Path::new(".")).join(&manifest.data.path),
    };
    if request.data.is_none() && !data_path.is_file() {
        return Err(Error::data(
            &data_path,
            None,
            format!(
                "is not where the results place it (data.path `{}` of the manifest at {}); pass --data FILE to name the table, \
                 which must still match the recorded file SHA-256",
                manifest.data.path,
                manifest_path.display()
            ),
        ));
    }
    let changed = |file_hash: &str| {
        Error::data(
            &data_path,
            None,
            format!("has changed since training: its SHA-256 is now {file_hash}, the results record {}", record.data.file_sha256),
        )
    };
    // The file is hashed once, by the first pass; a file that fails the first pass is hashed
    // again only to say whether it is the recorded one.
    let exp = match open_with_data(LoadedManifest { path: manifest_path, manifest, overridden_by_grid: Vec::new() }, data_path.clone()) {
        Ok(exp) => exp,
        Err(e) => match file_sha256(&data_path) {
            Ok(hash) if hash != record.data.file_sha256 => return Err(changed(&hash)),
            _ => return Err(e),
        },
    };
    if exp.data.file_sha256 != record.data.file_sha256 {
        return Err(changed(&exp.data.file_sha256));
    }
    if exp.data.content_sha256 != record.data.content_sha256 {
        return Err(Error::data(
            &data_path,
            None,
            format!("content hash {} differs from the recorded {}", exp.data.content_sha256, record.data.content_sha256),
        ));
    }
    let naming = match &record.run_inputs_sha256 {
        Some(inputs) => RunNaming::Inputs(inputs.clone()),
        None => RunNaming::Fingerprint(record.fingerprint.clone()),
    };
    let mut prepared = Prepared::with_naming(exp, &naming)?;
    let stored_plan: Plan = sealed.plan()?;
    if stored_plan != prepared.plan {
        return Err(Error::store(layout.plan(), "differs from the plan the manifest expands to"));
    }
    let stored_prep = sealed.preprocessor()?;
    if stored_prep != prepared.exp.preprocessor {
        return Err(Error::store(layout.preprocessor(), "differs from the preprocessor refitted on the training rows"));
    }
    let selection: Selection = sealed.selection()?;
    let specs: Vec<_> = prepared.plan.runs.iter().filter(|r| request.all || r.config_id == selection.selected_config).collect();

    let now = crate::numerics::current()?;
    let jobs = crate::threads::workers(request.jobs, specs.len())?;
    let threads = crate::threads::workers(request.jobs, crate::threads::MAX_WORKERS)?;
    let inputs = SweepInputs {
        layout,
        plan: &prepared.plan,
        head: prepared.exp.head(),
        data: prepared.run_data(),
        validation_rows: &prepared.exp.splits.validation,
        preprocessor: &prepared.exp.preprocessor,
        selection_metric: &prepared.exp.manifest.selection.metric,
        environment: &now,
        jobs,
        threads,
        shard: None,
    };
    on_event(Event::Header(format!("verify {}: retraining {} of {} runs", layout.root.display(), specs.len(), prepared.plan.runs.len())));
    on_event(Event::Planned {
        pending: specs.len(),
        reused: 0,
        metric: prepared.exp.manifest.selection.metric.clone(),
        direction: crate::metrics::registry::Direction::of_higher_is_better(selection.higher_is_better),
        retraining: true,
    });
    let runs: Vec<RunCheck> = crate::threads::each_on_workers(threads, crate::threads::runs_in_flight(jobs), &specs, |spec| {
        let differences = (|| {
            let stored = sealed.run(&spec.id)?;
            let fresh = train_run(&inputs, spec)?;
            let differences = compare_run(&stored, &fresh)?;
            let mut report = RunReport::new(&inputs, spec, &fresh.record, fresh.seconds);
            report.verdict =
                Some(if differences.is_empty() { "identical".into() } else { format!("DIFFERS ({} items)", differences.len()) });
            on_event(Event::Finished(report));
            Ok::<_, Error>(differences)
        })();
        let verdict = match differences {
            Ok(d) if d.is_empty() => RunVerdict::Identical,
            Ok(d) => RunVerdict::Differs(d),
            Err(e) => RunVerdict::CannotVerify(e.to_string()),
        };
        RunCheck { id: spec.id.clone(), seed: spec.seed, verdict }
    })?;

    let recorded_env: Option<NumericsFingerprint> = specs.first().and_then(|s| sealed.environment(&s.id));
    let numerics = match recorded_env {
        Some(recorded) => NumericsCheck::Recorded {
            promised: recorded.promises_same_bits_as(&now),
            tool_version: now.tool_version.clone(),
            kernel_version: now.kernel_version.clone(),
            differences: environment_differences(&recorded, &now),
        },
        None => NumericsCheck::NotRecorded,
    };
    // The selection and its one test evaluation, re-derived from the stored runs.
    let stored_runs = sealed.runs(&prepared.plan);
    let derived = match &stored_runs {
        Ok(runs) => crate::selection::derive(&mut prepared, runs, sealed.layout_version),
        // Shown as the reason the selection cannot be re-derived, as the error itself would be.
        Err(e) => Err(Error::Usage(e.to_string())),
    };
    let as_value = |s: &Selection| serde_json::to_value(s).map_err(|e| Error::Internal(format!("serialising the selection: {e}")));
    let stored_test_predictions = sealed.test_predictions_text()?;
    let selection_check = match derived {
        Ok(derived) if as_value(&derived.selection)? != as_value(&selection)? => {
            SelectionCheck::Differs("selection.json does not match the selection and test metrics re-derived from the stored runs".into())
        }
        Ok(derived) if stored_test_predictions.as_ref().is_some_and(|stored| *stored != derived.test_predictions) => {
            SelectionCheck::Differs("test-predictions.csv does not match the selected run's outputs on the test split, scored anew".into())
        }
        Ok(derived) if sealed.layout_version >= crate::selection::deployed::CALIBRATION_FROM => {
            let stored = sealed.fairness()?;
            let stored_importance = sealed.importance()?;
            let runs = stored_runs.as_deref().unwrap_or(&[]);
            match (
                crate::analysis::fairness::derive(&prepared, &derived),
                crate::analysis::importance::derive(&prepared, &derived, runs, sealed.layout_version),
            ) {
                (Ok(fresh), _) if fresh != stored => SelectionCheck::Differs(
                    "fairness.json does not match the disparity analysis re-derived from the deployed model's test outputs".into(),
                ),
                (Ok(_), Ok(fresh)) if fresh != stored_importance => SelectionCheck::Differs(
                    "importance.json does not match the permutation importance re-derived from the deployed model".into(),
                ),
                (Ok(_), Ok(fresh_importance)) if sealed.layout_version >= crate::analysis::sensitivity::SENSITIVITY_FROM => {
                    match (sealed.sensitivity()?, crate::analysis::sensitivity::derive(&prepared, &derived, runs, fresh_importance.as_ref(), sealed.layout_version)) {
                        (_, Err(e)) => SelectionCheck::CannotDerive(e.to_string()),
                        (stored_sensitivity, Ok(fresh)) if stored_sensitivity.as_ref() != Some(&fresh) => SelectionCheck::Differs(
                            "sensitivity.json does not match the reference rows, sensitivity table and integrated gradients re-derived from the deployed model".into(),
                        ),
                        (_, Ok(_)) if sealed.layout_version >= crate::analysis::profile::PROFILE_FROM => {
                            match (sealed.profile()?, crate::analysis::profile::derive(&prepared, &derived)) {
                                (_, Err(e)) => SelectionCheck::CannotDerive(e.to_string()),
                                (stored_profile, Ok(fresh)) if stored_profile.as_ref() != Some(&fresh) => SelectionCheck::Differs(
                                    "profile.json does not match the reference population re-derived from the training rows and the deployed model's test outputs".into(),
                                ),
                                (_, Ok(_)) => SelectionCheck::Matches {
                                    test_predictions: stored_test_predictions.is_some(),
                                    fairness: stored.is_some(),
                                    importance: stored_importance.is_some(),
                                    sensitivity: true,
                                    profile: true,
                                },
                            }
                        }
                        (_, Ok(_)) => SelectionCheck::Matches {
                            test_predictions: stored_test_predictions.is_some(),
                            fairness: stored.is_some(),
                            importance: stored_importance.is_some(),
                            sensitivity: true,
                            profile: false,
                        },
                    }
                }
                (Ok(_), Ok(_)) => SelectionCheck::Matches {
                    test_predictions: stored_test_predictions.is_some(),
                    fairness: stored.is_some(),
                    importance: stored_importance.is_some(),
                    sensitivity: false,
                    profile: false,
                },
                (Err(e), _) | (_, Err(e)) => SelectionCheck::CannotDerive(e.to_string()),
            }
        }
        Ok(_) => SelectionCheck::Matches {
            test_predictions: stored_test_predictions.is_some(),
            fairness: false,
            importance: false,
            sensitivity: false,
            profile: false,
        },
        Err(e) => SelectionCheck::CannotDerive(e.to_string()),
    };
    let card = match crate::card::render(layout, None, &digest) {
        Ok((card, _)) if card == sealed.card_text()? => CardCheck::Matches,
        Ok(_) => CardCheck::DiffersFromDefault,
        Err(e) => CardCheck::CannotRender(e.to_string()),
    };
    let root = layout.root.parent().unwrap_or(Path::new("."));
    let ledgered = crate::store::ledger::read(root)?
        .into_iter()
        .rev()
        .find(|e| e.fingerprint == record.fingerprint && e.results_digest.is_some())
        .and_then(|e| e.results_digest);
    let ledger = match ledgered {
        Some(d) if d == digest => LedgerCheck::Matches,
        Some(d) => LedgerCheck::Differs { ledgered: d },
        None => LedgerCheck::NotRecorded,
    };
    Ok(Verification {
        runs_planned: prepared.plan.runs.len(),
        verifier: (now.tool_version.clone(), format!("{} {}, kernels at {}", now.target_arch, now.target_os, now.kernel_level)),
        folder: layout.root.clone(),
        fingerprint: record.fingerprint.clone(),
        data_path,
        data_file_sha256: record.data.file_sha256.clone(),
        data_content_sha256: record.data.content_sha256.clone(),
        manifest_sha256: record.manifest_sha256.clone(),
        numerics,
        all: request.all,
        runs,
        selection: selection_check,
        card,
        digest,
        ledger,
    })
}
