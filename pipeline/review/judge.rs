//! Judging recorded reviews: each one's signature over its stored statement, its signer against an
//! allowed-signers file (at the statement's time, as git judges a commit at its date), its claims
//! against this folder (fingerprint, results digest, the card above the review section), its
//! validity today, and the separation of duties (a validator or approver who also signed as
//! developer, or who trained the experiment). Whether a review holds depends on the date and on
//! a file outside the folder, so it is judged here, on demand, and never sealed into the card.

use serde::Serialize;

use super::allowed_signers::{Acceptance, AllowedSigners};
use super::record::ReviewRecord;
use super::signature::{self, NAMESPACE};
use super::statement::{Role, Statement};
use crate::error::Result;
use crate::provenance::{date_days, date_text, rfc3339_seconds};

/// What a review is judged against.
pub struct Context<'a> {
    pub fingerprint: &'a str,
    pub results_digest: &'a str,
    /// [`super::statement::card_sha256`] of the card as it is now.
    pub card_sha256: &'a str,
    /// Today, days since 1970-01-01 (UTC).
    pub today: i64,
    /// Who trained the experiment: the timing record's `trained_by` and the manifest's, where given.
    pub trained_by: &'a [String],
    /// The allowed-signers file; `None` when there is none to read (every review is then unchecked).
    pub signers: Option<&'a AllowedSigners>,
}

/// One thing wrong with a review, by name.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "problem", content = "detail", rename_all = "kebab-case")]
pub enum Problem {
    /// The record's files do not match its own list, or it is not a record.
    RecordChanged(String),
    /// The statement's bytes are not a statement.
    UnreadableStatement(String),
    /// The signature does not verify over the statement.
    BadSignature(String),
    /// The signature was made for another namespace.
    WrongNamespace(String),
    /// No allowed-signers file to check the signer against.
    SignersUnchecked(String),
    /// The allowed-signers file does not list the signing key.
    UnknownSigner(String),
    /// The key is listed, but not under the name the statement gives.
    SignerMismatch(String),
    /// The key and name are listed, but not for this namespace or at the statement's time.
    SignerNotAllowed(String),
    /// The statement is about another folder (fingerprint or results digest).
    OtherFolder(String),
    /// The card was changed after the review (its hash above the review section differs).
    CardChanged(String),
    /// The review's valid-until date has passed.
    Expired(String),
    /// A validator or approver who also signed as developer, or who trained the experiment.
    SeparationOfDuties(String),
}

impl Problem {
    pub fn name(&self) -> &'static str {
        match self {
            Problem::RecordChanged(_) => "record changed",
            Problem::UnreadableStatement(_) => "unreadable statement",
            Problem::BadSignature(_) => "bad signature",
            Problem::WrongNamespace(_) => "wrong namespace",
            Problem::SignersUnchecked(_) => "signer unchecked",
            Problem::UnknownSigner(_) => "unknown signer",
            Problem::SignerMismatch(_) => "signer mismatch",
            Problem::SignerNotAllowed(_) => "signer not allowed",
            Problem::OtherFolder(_) => "another folder's review",
            Problem::CardChanged(_) => "card changed after review",
            Problem::Expired(_) => "expired",
            Problem::SeparationOfDuties(_) => "separation of duties",
        }
    }

    pub fn detail(&self) -> &str {
        match self {
            Problem::RecordChanged(d)
            | Problem::UnreadableStatement(d)
            | Problem::BadSignature(d)
            | Problem::WrongNamespace(d)
            | Problem::SignersUnchecked(d)
            | Problem::UnknownSigner(d)
            | Problem::SignerMismatch(d)
            | Problem::SignerNotAllowed(d)
            | Problem::OtherFolder(d)
            | Problem::CardChanged(d)
            | Problem::Expired(d)
            | Problem::SeparationOfDuties(d) => d,
        }
    }
}

/// The verdict on one recorded review.
#[derive(Debug, Clone, Serialize)]
pub struct Judgement {
    /// The record's folder name under `reviews/`.
    pub record: String,
    pub signer: Option<String>,
    pub role: Option<Role>,
    pub decision: Option<String>,
    pub time: Option<String>,
    pub valid_until: Option<String>,
    /// The signing key's SHA-256 fingerprint, when the signature verifies.
    pub key: Option<String>,
    /// The allowed-signers line that accepted the key.
    pub allowed_by_line: Option<usize>,
    pub problems: Vec<Problem>,
}

impl Judgement {
    /// The record `name`, before anything is known of it.
    fn of(name: &str) -> Self {
        Judgement {
            record: name.to_string(),
            signer: None,
            role: None,
            decision: None,
            time: None,
            valid_until: None,
            key: None,
            allowed_by_line: None,
            problems: Vec::new(),
        }
    }

    pub fn holds(&self) -> bool {
        self.problems.is_empty()
    }

    /// One line for people: `validator ana@x approved on 2026-12-04: holds` or the problems.
    pub fn describe(&self) -> String {
        let who = match (&self.role, &self.signer, &self.decision, &self.time) {
            (Some(role), Some(signer), Some(decision), Some(time)) => {
                format!("{} {signer} {decision} on {}", role.as_str(), time.get(..10).unwrap_or(time))
            }
            _ => "review".into(),
        };
        if self.holds() {
            let until = self.valid_until.as_ref().map(|d| format!(", valid until {d}")).unwrap_or_default();
            let line = self.allowed_by_line.map(|l| format!(" (allowed-signers line {l})")).unwrap_or_default();
            format!("{who}: holds{until}; signed by {}{line}", self.key.as_deref().unwrap_or("?"))
        } else {
            let problems: Vec<String> = self.problems.iter().map(|p| format!("{}: {}", p.name().to_uppercase(), p.detail())).collect();
            format!("{who}: {}", problems.join("; "))
        }
    }
}

fn judge_one(record: &ReviewRecord, ctx: &Context) -> (Judgement, Option<(Statement, ssh_key::PublicKey)>) {
    let mut j = Judgement::of(&record.name);
    let statement = match &record.statement {
        Ok(s) => s.clone(),
        Err(e) => {
            j.problems.push(Problem::UnreadableStatement(format!("{}: {e}", super::record::STATEMENT)));
            return (j, None);
        }
    };
    j.signer = Some(statement.signer.clone());
    j.role = Some(statement.role);
    j.decision = Some(statement.decision.as_str().into());
    j.time = Some(statement.time.clone());
    j.valid_until = statement.valid_until.clone();
    if statement.fingerprint != ctx.fingerprint {
        j.problems.push(Problem::OtherFolder(format!(
            "the statement is about experiment {}, this folder is {}",
            statement.fingerprint, ctx.fingerprint
        )));
    } else if statement.results_digest != ctx.results_digest {
        j.problems.push(Problem::OtherFolder(format!(
            "the statement names results digest {}, this folder's is {}",
            statement.results_digest, ctx.results_digest
        )));
    }
    if statement.card_sha256 != ctx.card_sha256 {
        j.problems.push(Problem::CardChanged(format!(
            "the reviewer read a card with SHA-256 {} (above the review section); card.md now gives {}",
            statement.card_sha256, ctx.card_sha256
        )));
    }
    if let Some(until) = statement.valid_until.as_deref().and_then(date_days) {
        if ctx.today > until {
            j.problems.push(Problem::Expired(format!("valid until {}, today is {}", date_text(until), date_text(ctx.today))));
        }
    }
    let key = match signature::verify(&record.statement_bytes, &record.signature) {
        Ok(key) => key,
        Err(signature::SignatureFault::WrongNamespace(ns)) => {
            j.problems.push(Problem::WrongNamespace(format!("the signature was made for namespace `{ns}`, not `{NAMESPACE}`")));
            return (j, None);
        }
        Err(fault) => {
            j.problems.push(Problem::BadSignature(format!("{} {}", super::record::SIGNATURE, fault.describe())));
            return (j, None);
        }
    };
    j.key = Some(signature::fingerprint(&key));
    match ctx.signers {
        None => j.problems.push(Problem::SignersUnchecked(
            "no allowed-signers file was given or found, so nobody vouches that this key is the signer's".into(),
        )),
        Some(signers) => {
            let at = rfc3339_seconds(&statement.time).unwrap_or_default();
            let file = signers.path.display();
            match signers.accepts(&key, &statement.signer, NAMESPACE, at) {
                Acceptance::Accepted { line } => j.allowed_by_line = Some(line),
                Acceptance::UnknownKey => {
                    j.problems.push(Problem::UnknownSigner(format!("{file} does not list the key {}", signature::fingerprint(&key))))
                }
                Acceptance::OtherPrincipal { listed } => j.problems.push(Problem::SignerMismatch(format!(
                    "the statement names {}, but {file} lists this key for {}",
                    statement.signer,
                    listed.join(" and ")
                ))),
                Acceptance::Refused { line, reason } => j
                    .problems
                    .push(Problem::SignerNotAllowed(format!("{file} line {line} {reason} (the statement is of {})", statement.time))),
            }
        }
    }
    (j, Some((statement, key)))
}

/// Judges every review recorded in the results folder at `root`, whose fingerprint and results
/// digest are given (from its integrity check or the ledger), against its card as it is now.
pub fn judge_folder(
    root: &std::path::Path,
    fingerprint: &str,
    results_digest: &str,
    trained_by: &[String],
    signers: Option<&AllowedSigners>,
    today: i64,
) -> Result<Vec<Judgement>> {
    let entries = super::record::read_all(root)?;
    if entries.is_empty() {
        return Ok(Vec::new());
    }
    let card_path = crate::store::Layout::new(root).card();
    let card = std::fs::read_to_string(&card_path).map_err(|e| crate::error::Error::io(&card_path, "read", e))?;
    let card_sha256 = super::statement::card_sha256(&card);
    let ctx = Context { fingerprint, results_digest, card_sha256: &card_sha256, today, trained_by, signers };
    Ok(judge(&entries, &ctx))
}

/// Judges every entry under `reviews/`, in order.
pub fn judge(entries: &[(String, Result<ReviewRecord>)], ctx: &Context) -> Vec<Judgement> {
    let mut judged: Vec<(Judgement, Option<(Statement, ssh_key::PublicKey)>)> = entries
        .iter()
        .map(|(name, record)| match record {
            Ok(record) => judge_one(record, ctx),
            Err(e) => (Judgement { problems: vec![Problem::RecordChanged(e.to_string())], ..Judgement::of(name) }, None),
        })
        .collect();
    // Separation of duties, among the reviews whose signatures verify.
    let developers: Vec<(String, String, ssh_key::PublicKey)> = judged
        .iter()
        .filter_map(|(j, s)| {
            s.as_ref().filter(|(st, _)| st.role == Role::Developer).map(|(st, k)| (j.record.clone(), st.signer.clone(), k.clone()))
        })
        .collect();
    for (j, signed) in &mut judged {
        let Some((st, key)) = signed else { continue };
        if st.role == Role::Developer {
            continue;
        }
        for (record, signer, dev_key) in &developers {
            if dev_key.key_data() == key.key_data() {
                j.problems.push(Problem::SeparationOfDuties(format!(
                    "the key that signed as {} also signed as developer ({record})",
                    st.role.as_str()
                )));
            } else if signer == &st.signer {
                j.problems.push(Problem::SeparationOfDuties(format!(
                    "{} signed as {} and as developer ({record})",
                    st.signer,
                    st.role.as_str()
                )));
            }
        }
        if ctx.trained_by.iter().any(|t| t == &st.signer) {
            j.problems.push(Problem::SeparationOfDuties(format!(
                "{} trained this experiment (trained_by of the timing record or the manifest) and signed as {}",
                st.signer,
                st.role.as_str()
            )));
        }
    }
    judged.into_iter().map(|(j, _)| j).collect()
}
