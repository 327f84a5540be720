//! Small pieces every card section uses: a table row of escaped cells, a metric's mean ± sd across
//! seeds, a manifest value as text, a list of labels.

use serde::Serialize;
use serde_json::Value;

use crate::selection::Spread;
use crate::text::{code_span, markdown_safe as md};

#[derive(Serialize)]
pub(crate) struct Row {
    pub(crate) cells: Vec<String>,
}

impl Row {
    pub(crate) fn of(cells: impl IntoIterator<Item = String>) -> Self {
        Row { cells: cells.into_iter().collect() }
    }
}

/// A metric's mean ± standard deviation across seeds, 4 decimals.
pub(crate) fn spread_text(s: Option<&Spread>) -> String {
    s.map(|s| crate::format::mean_sd(s.mean, s.sd)).unwrap_or_else(|| "–".into())
}

pub(crate) fn value_text(v: &Value) -> String {
    md(&v.to_string())
}

pub(crate) fn list(labels: &[String]) -> String {
    labels.iter().map(|l| code_span(l)).collect::<Vec<_>>().join(" or ")
}
