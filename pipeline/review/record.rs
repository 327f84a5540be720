//! Review records on disk: `reviews/<time>-<role>-<12 hex of the statement's SHA-256>/` holding
//! `statement.json` (the canonical statement) and `statement.json.sig` (its armoured SSH
//! signature), attached to the results folder through [`crate::store::attached`] so a review
//! never changes the evidence or its digest.

use std::path::Path;

use super::statement::Statement;
use crate::error::{Error, Result};
use crate::fingerprint::sha256_hex;
use crate::store::attached::{self, AttachedRecord};

/// The attached-record kind reviews are kept under.
pub const KIND: &str = "reviews";
pub const STATEMENT: &str = "statement.json";
pub const SIGNATURE: &str = "statement.json.sig";

/// One recorded review as found on disk, its list checked.
#[derive(Debug, Clone)]
pub struct ReviewRecord {
    /// The record's folder name under `reviews/`.
    pub name: String,
    /// SHA-256 of the record's `contents.sha256`.
    pub digest: String,
    pub statement_bytes: Vec<u8>,
    /// The statement, or why its bytes are not one.
    pub statement: std::result::Result<Statement, String>,
    pub signature: String,
}

/// The record's folder name: when, in which role, which statement.
pub fn record_name(statement: &Statement, bytes: &[u8]) -> String {
    let compact: String = statement.time.chars().filter(|c| c.is_ascii_alphanumeric()).collect();
    format!("{compact}-{}-{}", statement.role.as_str(), &sha256_hex(bytes)[..12])
}

/// Attaches a statement and its signature to the results folder at `root`.
pub fn write(root: &Path, statement: &Statement, bytes: &[u8], signature: &str) -> Result<AttachedRecord> {
    attached::attach(root, KIND, &record_name(statement, bytes), &[(STATEMENT, bytes), (SIGNATURE, signature.as_bytes())])
}

/// Every entry under `reviews/` of the folder at `root`, in name (time) order: the record, or
/// why it is not one (its list does not match its files, a file is missing, a loose file).
pub fn read_all(root: &Path) -> Result<Vec<(String, Result<ReviewRecord>)>> {
    let mut out = Vec::new();
    for (name, verdict) in attached::check_each(root, KIND)? {
        let record = verdict.and_then(|record| {
            let dir = root.join(KIND).join(&record.name);
            let read = |file: &str| std::fs::read(dir.join(file)).map_err(|e| Error::io(dir.join(file), "read", e));
            let statement_bytes = read(STATEMENT)?;
            let signature = String::from_utf8_lossy(&read(SIGNATURE)?).into_owned();
            let statement = Statement::from_bytes(&statement_bytes);
            Ok(ReviewRecord { name: record.name, digest: record.digest, statement_bytes, statement, signature })
        });
        out.push((name, record));
    }
    Ok(out)
}
