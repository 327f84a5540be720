//! `tabcard review <results folder> --role R --decision D ...`: record a signed review of the
//! folder's card. Three ways to sign: `--key` (an unencrypted Ed25519 key: tabcard signs), or
//! `--statement-out FILE` (write the statement for `ssh-keygen -Y sign`, with any key it can use)
//! then `--statement FILE --signature FILE.sig` (attach what ssh-keygen signed). The record goes
//! under `reviews/` as an attached record; the evidence, its digest and the card are untouched.

use std::fmt::Write;
use std::path::{Path, PathBuf};

use crate::error::{Error, Result};
use crate::results::Sealed;
use crate::review::allowed_signers;
use crate::review::allowed_signers::AllowedSigners;
use crate::review::judge::{judge_folder, Judgement};
use crate::review::record;
use crate::review::signature::{self, NAMESPACE};
use crate::review::statement::{card_sha256, Decision, Role, Statement, FORMAT};

/// How the statement gets its signature.
pub enum Signing {
    /// tabcard signs with this Ed25519 private key.
    Key(PathBuf),
    /// Write the statement here for the reviewer to sign with `ssh-keygen -Y sign`.
    StatementOut { path: PathBuf, force: bool },
    /// Attach a statement signed elsewhere, with its armoured signature.
    Signed { statement: PathBuf, signature: PathBuf },
}

pub struct ReviewOptions {
    pub role: Option<Role>,
    pub decision: Option<Decision>,
    pub conditions: Option<String>,
    pub note: Option<PathBuf>,
    pub valid_until: Option<String>,
    /// The signer's identity (default: git's user.email here, else the login name).
    pub signer: Option<String>,
    pub signing: Signing,
    pub allowed_signers: Option<PathBuf>,
}

fn read_text(path: &Path, what: &'static str) -> Result<String> {
    std::fs::read_to_string(path).map_err(|e| Error::io(path, what, e))
}

/// The statement this review makes of `folder`.
fn make_statement(folder: &Sealed, options: &ReviewOptions) -> Result<Statement> {
    let missing = |flag: &str| Error::Usage(format!("{flag} is required to make a review statement"));
    let signer = match &options.signer {
        Some(s) => s.clone(),
        None => crate::provenance::user_identity(Path::new("./here"))
            .ok_or_else(|| Error::Usage("--signer is required: neither git's user.email nor USER names you".into()))?,
    };
    let note = options.note.as_deref().map(|p| read_text(p, "read the note")).transpose()?;
    let statement = Statement {
        format: FORMAT.into(),
        fingerprint: folder.record.fingerprint.clone(),
        results_digest: folder.digest.clone(),
        card_sha256: card_sha256(&folder.card_text()?),
        role: options.role.ok_or_else(|| missing("--role"))?,
        decision: options.decision.ok_or_else(|| missing("--decision"))?,
        conditions: options.conditions.clone(),
        note,
        signer,
        time: crate::provenance::now_rfc3339(),
        valid_until: options.valid_until.clone(),
        tool_version: crate::experiment::TOOL_VERSION.into(),
    };
    statement.validate()?;
    if let Some(until) = statement.valid_until.as_deref().and_then(crate::provenance::date_days) {
        if until < crate::provenance::today_days() {
            return Err(Error::Usage(format!("--valid-until {until_text} has passed", until_text = crate::provenance::date_text(until))));
        }
    }
    Ok(statement)
}

/// A statement signed elsewhere must be about this folder as it is now, and its signature must
/// verify in our namespace, before it is attached.
fn check_signed(folder: &Sealed, statement_path: &Path, signature_path: &Path) -> Result<(Statement, Vec<u8>, String)> {
    let bytes = std::fs::read(statement_path).map_err(|e| Error::io(statement_path, "read the statement", e))?;
    let statement = Statement::from_bytes(&bytes).map_err(|e| Error::Usage(format!("{}: {e}", statement_path.display())))?;
    statement.validate()?;
    let card = card_sha256(&folder.card_text()?);
    let refuse = |what: String| Err(Error::Usage(format!("{}: {what}", statement_path.display())));
    if statement.fingerprint != folder.record.fingerprint || statement.results_digest != folder.digest {
        return refuse(format!("is about experiment {} ({}), not this folder", statement.fingerprint, statement.results_digest));
    }
    if statement.card_sha256 != card {
        return refuse("names another card than this folder's card.md: the card was re-rendered or changed since".into());
    }
    let armoured = read_text(signature_path, "read the signature")?;
    signature::verify(&bytes, &armoured).map_err(|fault| Error::Usage(format!("{}: {}", signature_path.display(), fault.describe())))?;
    Ok((statement, bytes, armoured))
}

/// Every review recorded in the results folder at `root` (fingerprint and results digest as its
/// check or the ledger gives them), judged today against `signers` and the folder's trainers:
/// what `review`, `verify` and `history` report.
pub(crate) fn judge_reviews(root: &Path, fingerprint: &str, digest: &str, signers: Option<&AllowedSigners>) -> Result<Vec<Judgement>> {
    judge_folder(root, fingerprint, digest, &crate::results::trainers(root), signers, crate::provenance::today_days())
}

pub fn run(folder_path: &Path, options: &ReviewOptions) -> Result<String> {
    let folder = Sealed::open(folder_path)?;
    let mut out = String::new();
    let (statement, bytes, armoured) = match &options.signing {
        Signing::StatementOut { path, force } => {
            let statement = make_statement(&folder, options)?;
            if path.exists() && !force {
                return Err(Error::Usage(format!("{} exists: pass --force to replace it", path.display())));
            }
            crate::store::write_atomic(path, &statement.to_bytes()?)?;
            let _ = writeln!(
                out,
                "statement  {} ({} {} of {})",
                path.display(),
                statement.role.as_str(),
                statement.decision.as_str(),
                statement.fingerprint
            );
            let _ = writeln!(out, "sign it     ssh-keygen -Y sign -n {NAMESPACE} -f <your key> {}", path.display());
            let _ = writeln!(
                out,
                "then        tabcard review {} --statement {} --signature {}.sig",
                folder_path.display(),
                path.display(),
                path.display()
            );
            return Ok(out);
        }
        Signing::Key(key) => {
            let statement = make_statement(&folder, options)?;
            let bytes = statement.to_bytes()?;
            let (armoured, _) = signature::sign(key, &bytes)?;
            (statement, bytes, armoured)
        }
        Signing::Signed { statement, signature } => check_signed(&folder, statement, signature)?,
    };
    // A card rendered with the built-in templates is rendered again with the review; a card from
    // the team's own templates is theirs to render (`card --templates`).
    let default_card = crate::card::render(&folder.layout, None, &folder.digest).map(|(text, _)| text)? == folder.card_text()?;
    let written = record::write(&folder.layout.root, &statement, &bytes, &armoured)?;
    let _ = writeln!(
        out,
        "recorded   {}/{}/{} (sealed by contents.sha256, digest {})",
        folder.layout.root.display(),
        record::KIND,
        written.name,
        written.digest
    );
    let _ = writeln!(out, "evidence   unchanged: results digest {}", folder.digest);
    // Judge the new review as verify and history will (other reviews are theirs to report).
    let results_root = folder.layout.root.parent().unwrap_or(Path::new("."));
    let signers = allowed_signers::locate(options.allowed_signers.as_deref(), results_root)?;
    let judged = judge_reviews(&folder.layout.root, &folder.record.fingerprint, &folder.digest, signers.as_ref())?;
    if let Some(j) = judged.iter().find(|j| j.record == written.name) {
        let _ = writeln!(out, "check      {}", crate::text::terminal_safe(&j.describe()));
    }
    if default_card {
        crate::card::write_card(&folder.layout, None)?;
        let _ = writeln!(
            out,
            "card       {} rendered again with the review (the text above its review section is unchanged)",
            folder.layout.card().display()
        );
    } else {
        let _ = writeln!(
            out,
            "card       rendered from your own templates: run `tabcard card {} --templates <folder>` to show the review",
            folder_path.display()
        );
    }
    Ok(out)
}
