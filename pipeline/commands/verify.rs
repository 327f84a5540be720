//! `tabcard verify <results folder | manifest>`: runs the library's verification
//! ([`crate::verification`]), prints what it found, and records the verdict in
//! `verifications.jsonl` beside the ledger.

use std::fmt::Write;
use std::path::{Path, PathBuf};

use crate::error::Result;
use crate::sweep::Event;
use crate::verification::{self, CardCheck, LedgerCheck, NumericsCheck, RunVerdict, SelectionCheck, Verification, VerifyRequest};

pub struct VerifyOptions {
    pub all: bool,
    pub jobs: usize,
    /// Use this data file instead of the recorded path (it must still match the fingerprints).
    pub data: Option<PathBuf>,
    pub results_root: PathBuf,
    /// The allowed-signers file reviews are judged with (see [`crate::review::allowed_signers::locate`]).
    pub allowed_signers: Option<PathBuf>,
}

pub struct VerifyOutcome {
    pub report: String,
    pub identical: bool,
    /// Every recorded review holds (true when there are none).
    pub reviews_hold: bool,
    pub json: serde_json::Value,
}

pub fn run(target: &Path, options: &VerifyOptions, on_event: &(dyn Fn(Event) + Sync)) -> Result<VerifyOutcome> {
    let folder = verification::results_folder(target, &options.results_root)?;
    let manifest = crate::manifest::is_manifest_path(target).then(|| target.to_path_buf());
    let request = VerifyRequest { all: options.all, jobs: options.jobs, data: options.data.clone(), manifest };
    // The allowed-signers file is read first: a named file that cannot be read stops before any
    // retraining.
    let results_root = folder.parent().unwrap_or(Path::new("."));
    let signers = crate::review::allowed_signers::locate(options.allowed_signers.as_deref(), results_root)?;
    let found = verification::verify(&folder, &request, on_event)?;
    let identical = found.identical();
    let reviews = super::review::judge_reviews(&found.folder, &found.fingerprint, &found.digest, signers.as_ref())?;
    let reviews_hold = reviews.iter().all(|r| r.holds());
    let mut report = report_text(&found);
    reviews_text(&mut report, &reviews, signers.as_ref());
    // The verdict stands whether or not it can be recorded (a read-only store): say both.
    let recorded = crate::store::ledger::append_verification(found.project_root(), &found.entry());
    if let Err(e) = &recorded {
        let _ = writeln!(report, "warning   this verification could not be recorded in {}: {e}", crate::store::ledger::VERIFICATIONS);
    }
    let mut json = report_json(&found, recorded.is_ok());
    json["reviews"] = serde_json::to_value(&reviews).unwrap_or_default();
    json["reviews_hold"] = serde_json::Value::Bool(reviews_hold);
    Ok(VerifyOutcome { report, identical, reviews_hold, json })
}

/// The recorded reviews' verdicts, one line each, after the bits' verdict.
pub(crate) fn reviews_text(
    out: &mut String,
    reviews: &[crate::review::judge::Judgement],
    signers: Option<&crate::review::allowed_signers::AllowedSigners>,
) {
    if reviews.is_empty() {
        let _ = writeln!(out, "reviews   none recorded");
        return;
    }
    reviews_lines(out, reviews, signers);
}

/// The reviews' verdicts as `verify` and `history` print them: the allowed-signers file, then one
/// line per record.
pub(crate) fn reviews_lines(
    out: &mut String,
    reviews: &[crate::review::judge::Judgement],
    signers: Option<&crate::review::allowed_signers::AllowedSigners>,
) {
    let against = match signers {
        Some(s) => format!("signers from {}", s.path.display()),
        None => "no allowed-signers file (--allowed-signers, $TABCARD_ALLOWED_SIGNERS or allowed_signers at the results root)".into(),
    };
    let holding = reviews.iter().filter(|r| r.holds()).count();
    let _ = writeln!(out, "reviews   {holding} of {} hold (checked against {against}):", reviews.len());
    for r in reviews {
        let _ = writeln!(out, "  {}: {}", r.record, crate::text::terminal_safe(&r.describe()));
    }
}

/// The verification as the text report `verify` prints.
fn report_text(found: &Verification) -> String {
    let mut out = String::new();
    let _ = writeln!(out, "verifying {} ({})", found.folder.display(), found.fingerprint);
    let _ = writeln!(
        out,
        "data      {} matches: file SHA-256 {}, content SHA-256 {}",
        found.data_path.display(),
        found.data_file_sha256,
        found.data_content_sha256
    );
    let _ = writeln!(out, "manifest  matches its recorded SHA-256 {}", found.manifest_sha256);
    match &found.numerics {
        NumericsCheck::Recorded { promised, tool_version, kernel_version, differences } => {
            let _ = if *promised {
                writeln!(
                    out,
                    "numerics  tabcard {tool_version} with kernels {kernel_version}, as recorded: identical bits are promised on any CPU"
                )
            } else {
                writeln!(out, "numerics  DIFFER from the recorded ones: identical bits are promised only for the same tabcard version and kernel version")
            };
            for line in differences {
                let _ = writeln!(out, "  {line}");
            }
        }
        NumericsCheck::NotRecorded => {
            let _ = writeln!(out, "numerics  no recorded environment to compare");
        }
    }
    let _ = writeln!(out, "\nruns ({}):", if found.all { "all" } else { "selected configuration" });
    for run in &found.runs {
        let (id, seed) = (&run.id, run.seed);
        match &run.verdict {
            RunVerdict::Identical => {
                let _ = writeln!(out, "  {id} seed {seed}: identical (weights, history, metrics)");
            }
            RunVerdict::Differs(d) => {
                let _ = writeln!(out, "  {id} seed {seed}: DIFFERS");
                for line in d {
                    let _ = writeln!(out, "    {line}");
                }
            }
            RunVerdict::CannotVerify(e) => {
                let _ = writeln!(out, "  {id} seed {seed}: CANNOT VERIFY: {e}");
            }
        }
    }
    let _ = match &found.selection {
        SelectionCheck::Matches { test_predictions, fairness, importance, sensitivity, profile } => writeln!(
            out,
            "\nselection re-derived from the stored runs: matches selection.json (selected run, validation summaries, test metrics and intervals){}{}{}{}{}",
            if *test_predictions { " and test-predictions.csv" } else { "" },
            if *fairness { ", and the disparity analysis matches fairness.json" } else { "" },
            if *importance { ", and the permutation importance matches importance.json" } else { "" },
            if *sensitivity { ", and the reference rows, sensitivity table and integrated gradients match sensitivity.json" } else { "" },
            if *profile { ", and the reference population monitoring compares with matches profile.json" } else { "" }
        ),
        SelectionCheck::Differs(what) => writeln!(out, "\nselection DIFFERS: {what}"),
        SelectionCheck::CannotDerive(e) => writeln!(out, "\nselection CANNOT be re-derived from the stored runs: {e}"),
    };
    let _ = match &found.card {
        CardCheck::Matches => writeln!(out, "card      matches the card rendered from the stored evidence"),
        CardCheck::DiffersFromDefault => writeln!(out, "card      differs from the default rendering of the evidence (expected only when it was rendered with `card --templates` or timing.json changed)"),
        CardCheck::CannotRender(e) => writeln!(out, "card      CANNOT be re-rendered from the stored evidence: {e}"),
    };
    let digest = &found.digest;
    let _ = match &found.ledger {
        LedgerCheck::Matches => {
            writeln!(out, "digest    {digest}: every stored file matches integrity.sha256, and the ledger records this digest")
        }
        LedgerCheck::Differs { ledgered } => {
            writeln!(out, "digest    {digest} DIFFERS from the ledger's {ledgered}: integrity.sha256 was rewritten after training")
        }
        LedgerCheck::NotRecorded => writeln!(
            out,
            "digest    {digest}: every stored file matches integrity.sha256 (no ledger line records a digest for this experiment)"
        ),
    };
    let verdict = if found.identical() { "verified: every run reproduced bit for bit" } else { "NOT verified" };
    let _ = writeln!(out, "\nverdict   {verdict}");
    out
}

/// The verification as `verify --json` prints it.
fn report_json(found: &Verification, recorded: bool) -> serde_json::Value {
    let runs: Vec<serde_json::Value> = found
        .runs
        .iter()
        .map(|r| match &r.verdict {
            RunVerdict::Identical => serde_json::json!({ "run": r.id, "seed": r.seed, "identical": true, "differences": [] }),
            RunVerdict::Differs(d) => serde_json::json!({ "run": r.id, "seed": r.seed, "identical": false, "differences": d }),
            RunVerdict::CannotVerify(e) => serde_json::json!({ "run": r.id, "seed": r.seed, "identical": false, "error": e }),
        })
        .collect();
    serde_json::json!({
        "results": found.folder.display().to_string(),
        "fingerprint": found.fingerprint,
        "identical": found.identical(),
        "results_digest": found.digest,
        "runs": runs,
        "recorded": recorded,
    })
}
