//! The card's first section: purpose, ownership and the reviewer's fields, from the manifest.

use serde::Serialize;

use crate::manifest::Manifest;
use crate::text::{markdown_safe as md, markdown_text as md_text};

/// Purpose, ownership and the reviewer's fields.
#[derive(Serialize)]
pub(crate) struct About {
    pub(crate) name: String,
    pub(crate) description: String,
    pub(crate) intended_use: String,
    pub(crate) out_of_scope: String,
    pub(crate) owner: String,
    pub(crate) trained_by: String,
    pub(crate) data_period: String,
    pub(crate) population: String,
    pub(crate) affects_people: bool,
    pub(crate) group_columns: Vec<String>,
    /// Inventory name and version, when the manifest gives them.
    pub(crate) model: String,
    pub(crate) replaces: String,
    /// The team's own known limitations and monitoring plan (empty when not written).
    pub(crate) team_limitations: String,
    pub(crate) monitoring_plan: String,
}

pub(crate) fn about(m: &Manifest) -> About {
    let e = &m.experiment;
    let stated = |s: &str| if s.trim().is_empty() { "not stated".to_string() } else { md_text(s) };
    // Owner and trainer sit in table cells: one line each, whatever the manifest holds.
    let stated_cell = |s: &str| if s.trim().is_empty() { "not stated".to_string() } else { crate::text::markdown_cell_text(s) };
    About {
        name: md(&e.name),
        description: md_text(&e.description),
        intended_use: stated(&e.intended_use),
        out_of_scope: stated(&e.out_of_scope),
        owner: stated_cell(&e.owner),
        trained_by: stated_cell(&e.trained_by),
        data_period: stated(&e.data_period),
        population: stated(&e.population),
        affects_people: e.affects_people,
        group_columns: m.data.group_columns.iter().map(|g| md(g)).collect(),
        model: match (e.model_name.trim(), e.model_version.trim()) {
            ("", "") => String::new(),
            (name, "") => crate::text::markdown_cell_text(name),
            ("", version) => format!("version {}", crate::text::markdown_cell_text(version)),
            (name, version) => format!("{}, version {}", crate::text::markdown_cell_text(name), crate::text::markdown_cell_text(version)),
        },
        replaces: if e.replaces.is_empty() { String::new() } else { format!("`{}`", e.replaces) },
        team_limitations: md_text(&e.known_limitations),
        monitoring_plan: md_text(&e.monitoring_plan),
    }
}
