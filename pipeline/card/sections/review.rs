//! The card's last section: the reviews recorded under `reviews/`, as their statements claim them
//! (who, role, decision, conditions, when, valid until). Whether each signature holds depends on
//! the date and on an allowed-signers file outside the folder, so the card shows the claims and
//! how to check them; `verify` and `history` judge them.

use serde::Serialize;

use crate::error::Result;
use crate::review::record::read_all;
use crate::review::statement::CARD_MARKER;
use crate::store::Layout;
use crate::text::{code_span, markdown_cell_text as cell};

/// One recorded review, as the card lists it.
#[derive(Serialize)]
pub(crate) struct ReviewRow {
    pub(crate) time: String,
    pub(crate) signer: String,
    pub(crate) role: String,
    pub(crate) decision: String,
    pub(crate) valid_until: String,
    pub(crate) record: String,
}

#[derive(Serialize)]
pub(crate) struct Reviews {
    /// The line the review section starts after ([`CARD_MARKER`]).
    pub(crate) marker: String,
    pub(crate) rows: Vec<ReviewRow>,
    /// Notes of the reviews, `record: text`, one paragraph each.
    pub(crate) notes: Vec<String>,
    /// Entries under `reviews/` that are not readable records, named.
    pub(crate) unreadable: Vec<String>,
}

pub(crate) fn reviews(layout: &Layout) -> Result<Reviews> {
    let mut out = Reviews { marker: CARD_MARKER.into(), rows: Vec::new(), notes: Vec::new(), unreadable: Vec::new() };
    for (name, record) in read_all(&layout.root)? {
        match record.map(|r| r.statement) {
            Ok(Ok(s)) => {
                let decision = match &s.conditions {
                    Some(c) => format!("{}: {}", s.decision.as_str(), cell(c)),
                    None => s.decision.as_str().to_string(),
                };
                if let Some(note) = &s.note {
                    out.notes.push(format!("{}: {}", code_span(&name), cell(note)));
                }
                out.rows.push(ReviewRow {
                    time: s.time.clone(),
                    signer: cell(&s.signer),
                    role: s.role.as_str().into(),
                    decision,
                    valid_until: s.valid_until.clone().unwrap_or_else(|| "not limited".into()),
                    record: code_span(&name),
                });
            }
            _ => out.unreadable.push(code_span(&name)),
        }
    }
    Ok(out)
}
