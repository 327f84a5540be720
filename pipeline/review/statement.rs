//! The review statement: the small JSON document a reviewer signs. Its bytes are written once, in
//! one canonical form (the fields in a fixed order, two-space indentation, a final newline), and
//! the signature covers exactly those stored bytes; reading parses them strictly (no unknown or
//! missing field), so what is shown is what was signed.

use serde::{Deserialize, Serialize};

use crate::error::{Error, Result};
use crate::fingerprint::sha256_hex;

/// The statement's format name, first field of every statement.
pub const FORMAT: &str = "tabcard-review-1";

/// The line of the card that opens its review section. A statement's `card_sha256` covers the
/// card above this line, so rendering recorded reviews into the card does not change what a
/// reviewer read; `sed '/^<!-- tabcard: review section/,$d' card.md | sha256sum` recomputes it.
pub const CARD_MARKER: &str = "<!-- tabcard: review section. A review's card_sha256 is the SHA-256 of the card above this line. -->";

/// Who signs, by the duty they hold for the model: the developer built it and vouches for how
/// it was built, the validator challenged it independently of its development, the approver
/// decided that it may be used.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum Role {
    // Built the model and vouches for how it was built.
    Developer,
    // Challenged the model independently of its development.
    Validator,
    // Decided that the model may be used.
    Approver,
}

impl Role {
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Developer => "developer",
            Role::Validator => "validator",
            Role::Approver => "approver",
        }
    }
}

/// What the reviewer decided.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, clap::ValueEnum)]
#[serde(rename_all = "kebab-case")]
pub enum Decision {
    Approved,
    ApprovedWithConditions,
    Rejected,
}

impl Decision {
    pub fn as_str(self) -> &'static str {
        match self {
            Decision::Approved => "approved",
            Decision::ApprovedWithConditions => "approved-with-conditions",
            Decision::Rejected => "rejected",
        }
    }
}

/// One reviewer's signed claim about one results folder.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Statement {
    /// [`FORMAT`].
    pub format: String,
    /// The experiment fingerprint (the results folder's name).
    pub fingerprint: String,
    /// The results digest of the evidence the reviewer saw.
    pub results_digest: String,
    /// SHA-256 of the card the reviewer read, above [`CARD_MARKER`].
    pub card_sha256: String,
    pub role: Role,
    pub decision: Decision,
    /// The conditions of an approval with conditions (required then, refused otherwise).
    pub conditions: Option<String>,
    /// The reviewer's note, as text.
    pub note: Option<String>,
    /// The signer's identity, as the allowed-signers file names them (an e-mail address, say).
    pub signer: String,
    /// When the statement was made, RFC 3339 UTC (the reviewer's clock).
    pub time: String,
    /// The last day (UTC, `YYYY-MM-DD`) the review stands, when it has one.
    pub valid_until: Option<String>,
    /// The tabcard that wrote the statement.
    pub tool_version: String,
}

impl Statement {
    /// Checks what a statement must hold to be made, naming the first thing missing or wrong.
    pub fn validate(&self) -> Result<()> {
        let usage = |m: String| Err(Error::Usage(m));
        if self.format != FORMAT {
            return usage(format!("the statement's format is `{}`, this tabcard reads `{FORMAT}`", self.format));
        }
        match (self.decision, &self.conditions) {
            (Decision::ApprovedWithConditions, None) => {
                return usage("--decision approved-with-conditions needs --conditions: the conditions are part of what is signed".into())
            }
            (Decision::Approved | Decision::Rejected, Some(_)) => {
                return usage(format!("--conditions belongs to --decision approved-with-conditions, not {}", self.decision.as_str()))
            }
            _ => {}
        }
        let signer_ok = !self.signer.is_empty() && !self.signer.chars().any(|c| c.is_whitespace() || c.is_control() || c == ',');
        if !signer_ok {
            return usage(format!(
                "the signer `{}` cannot be a principal of an allowed-signers file: no spaces, commas or control characters",
                self.signer
            ));
        }
        if crate::provenance::rfc3339_seconds(&self.time).is_none() {
            return usage(format!("the statement's time `{}` is not YYYY-MM-DDTHH:MM:SSZ", self.time));
        }
        if let Some(date) = &self.valid_until {
            if crate::provenance::date_days(date).is_none() {
                return usage(format!("--valid-until `{date}` is not a date YYYY-MM-DD"));
            }
        }
        Ok(())
    }

    /// The canonical bytes: what is stored and signed.
    pub fn to_bytes(&self) -> Result<Vec<u8>> {
        let mut text = serde_json::to_string_pretty(self).map_err(|e| Error::Internal(format!("review statement: {e}")))?;
        text.push('\n');
        Ok(text.into_bytes())
    }

    /// Parses stored bytes; they must be the canonical form of what they parse to, so nothing
    /// outside the fields (spacing, duplicate keys, a different order) can ride along unseen.
    pub fn from_bytes(bytes: &[u8]) -> std::result::Result<Self, String> {
        let statement: Statement = serde_json::from_slice(bytes).map_err(|e| format!("is not a review statement: {e}"))?;
        match statement.to_bytes() {
            Ok(canonical) if canonical == bytes => Ok(statement),
            _ => Err("is not in the canonical form tabcard writes (fields in order, two-space indentation, one final newline)".into()),
        }
    }
}

/// SHA-256 of a card's text above its review section ([`CARD_MARKER`]), or of the whole text when
/// it has none (a card from a template without the section).
pub fn card_sha256(card: &str) -> String {
    let above = match card.find(&format!("\n{CARD_MARKER}")) {
        Some(at) => &card[..at + 1],
        None if card.starts_with(CARD_MARKER) => "",
        None => card,
    };
    sha256_hex(above.as_bytes())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn statement() -> Statement {
        Statement {
            format: FORMAT.into(),
            fingerprint: "ab".repeat(32),
            results_digest: "cd".repeat(32),
            card_sha256: "ef".repeat(32),
            role: Role::Validator,
            decision: Decision::ApprovedWithConditions,
            conditions: Some("re-validate after 6 months".into()),
            note: None,
            signer: "risk@example.org".into(),
            time: "2026-12-04T10:00:00Z".into(),
            valid_until: Some("2027-06-30".into()),
            tool_version: "0.10.0".into(),
        }
    }

    #[test]
    fn statements_round_trip_only_in_canonical_form() {
        let s = statement();
        s.validate().unwrap();
        let bytes = s.to_bytes().unwrap();
        assert_eq!(Statement::from_bytes(&bytes).unwrap(), s);
        let text = String::from_utf8(bytes.clone()).unwrap();
        assert!(text.starts_with("{\n  \"format\": \"tabcard-review-1\",\n  \"fingerprint\""), "{text}");
        let reindented = text.replace("  \"", "   \"");
        assert!(Statement::from_bytes(reindented.as_bytes()).unwrap_err().contains("canonical"));
        let extra = text.replacen("{\n", "{\n  \"extra\": 1,\n", 1);
        assert!(Statement::from_bytes(extra.as_bytes()).unwrap_err().contains("unknown field"));
    }

    #[test]
    fn conditions_go_with_their_decision_and_signers_are_principals() {
        let mut s = statement();
        s.conditions = None;
        assert!(s.validate().unwrap_err().to_string().contains("needs --conditions"));
        s.decision = Decision::Approved;
        s.validate().unwrap();
        s.signer = "two words".into();
        assert!(s.validate().unwrap_err().to_string().contains("cannot be a principal"));
        s.signer = "a@b".into();
        s.valid_until = Some("2027-02-30".into());
        assert!(s.validate().unwrap_err().to_string().contains("--valid-until"));
    }

    #[test]
    fn the_card_hash_covers_the_text_above_the_review_section() {
        let card = format!("# Card\nbody\n{CARD_MARKER}\n## Review and sign-off\nnone\n");
        let with_review = format!("# Card\nbody\n{CARD_MARKER}\n## Review and sign-off\n| validator | approved |\n");
        assert_eq!(card_sha256(&card), sha256_hex(b"# Card\nbody\n"));
        assert_eq!(card_sha256(&card), card_sha256(&with_review));
        assert_ne!(card_sha256(&card), card_sha256(&card.replace("body", "edited")));
        assert_eq!(card_sha256("no marker\n"), sha256_hex(b"no marker\n"));
    }
}
