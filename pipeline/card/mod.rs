//! The model card: a typed context built in one place from a results folder alone (never from a
//! live experiment), rendered with tera from `templates/` (embedded; a user folder overrides them
//! file by file), plus its SVG figures. Every string that comes from data or from the manifest is
//! escaped for markdown before it enters the context; numbers are formatted with fixed digits, so
//! the card is byte-stable for the same results.

pub(crate) mod cells;
pub(crate) mod evidence;
pub(crate) mod figures;
pub(crate) mod limitations;
pub(crate) mod plots;
pub(crate) mod sections;

use serde::Serialize;

use figures::{figures, Figure, Figures};
use sections::about::{about, About};
use sections::calibration::{calibration, Calibration};
use sections::capacity::{capacity, Capacity};
use sections::data::{data_section, DataSection};
use sections::groups::{groups, Groups};
use sections::importance::{importance, Importance};
use sections::provenance::{provenance, Provenance};
use sections::replaced::{replaced, Replaced};
use sections::results::{results, Results};
use sections::review::{reviews, Reviews};
use sections::sensitivity::{sensitivity, Sensitivity};
use std::collections::BTreeMap;
use std::path::Path;

use crate::error::{Error, Result};
use crate::manifest::Task;
use crate::numerics::NumericsFingerprint;
use crate::results::StoredResults;
use crate::store::run::StoredRun;
use crate::store::{read_json, write_atomic, Layout};
use crate::text::{code_span, markdown_line as md_line, markdown_safe as md};
use limitations::{derive, Limitation};

/// What the template reads: one field per section.
#[derive(Serialize)]
struct CardContext {
    about: About,
    task: String,
    target: String,
    positive_label: String,
    /// The deployed decision, leading the card; empty for regression.
    decision: String,
    data: DataSection,
    capacity: Capacity,
    results: Results,
    calibration: Calibration,
    groups: Groups,
    importance: Importance,
    sensitivity: Sensitivity,
    figures: Vec<Figure>,
    limitations: Vec<Limitation>,
    provenance: Provenance,
    reviews: Reviews,
    replaced: Replaced,
}

const TEMPLATES: &[(&str, &str)] = &[
    ("card.md.tera", include_str!("../../templates/card.md.tera")),
    ("cautions.md.tera", include_str!("../../templates/cautions.md.tera")),
];

fn build(layout: &Layout) -> Result<(CardContext, Figures)> {
    let st = StoredResults::read(layout)?;
    let sel = &st.selection;
    let selected_runs: Vec<&StoredRun> =
        st.runs.iter().filter(|r| r.record.config_id == sel.selected_config && r.record.outcome.is_completed()).collect();
    let selected_cfg =
        st.plan.config(&sel.selected_config).ok_or_else(|| Error::store(layout.plan(), "does not list the selected configuration"))?;
    let selected_run = st
        .runs
        .iter()
        .find(|r| r.record.run_id == sel.selected_run)
        .ok_or_else(|| Error::store(layout.runs(), "the selected run is missing"))?;
    let environment: NumericsFingerprint = read_json(&selected_run.dir.join(crate::store::run::ENVIRONMENT))?;
    let mut evidence = evidence::gather(&st.manifest, &st.record, &st.summary, sel, selected_cfg, selected_run.record.parameter_count);
    evidence.fairness = st.fairness.clone();
    evidence.importance = st.importance.clone();
    evidence.sensitivity = st.sensitivity.clone();
    let limitations: Vec<Limitation> = derive(&evidence)
        .into_iter()
        .map(|l| Limitation { finding: md_line(&sentence_case(&l.finding)), threshold: md_line(&l.threshold), ..l })
        .collect();
    let mut figs = figures(&st.manifest, sel, &selected_runs, st.layout_version)?;
    let curve_figs =
        st.sensitivity.as_ref().map(|s| figures::curve_figures(s, st.manifest.data.task, &st.record.class_labels)).unwrap_or_default();
    let context = CardContext {
        about: about(&st.manifest),
        task: st.manifest.data.task.as_str().into(),
        target: md(&st.manifest.data.target),
        positive_label: if st.manifest.data.task == Task::Binary {
            st.record.class_labels.get(1).map(|l| code_span(l)).unwrap_or_default()
        } else {
            String::new()
        },
        decision: sections::decision::lead(&st),
        data: data_section(&st),
        capacity: capacity(&st, selected_cfg, selected_run),
        results: results(&st, &limitations),
        calibration: calibration(&st),
        groups: groups(&st),
        importance: importance(&st),
        sensitivity: sensitivity(&st, &curve_figs),
        // Captions are sentences of our own that embed names: escaped, never cut.
        figures: figs.iter().map(|(f, a, _)| Figure { file: f.clone(), alt: crate::text::markdown_line(a) }).collect(),
        limitations,
        provenance: provenance(&st, layout, &environment),
        reviews: reviews(layout)?,
        replaced: replaced(layout, &st.manifest.experiment.replaces)?,
    };
    figs.extend(curve_figs);
    Ok((context, figs))
}

fn tera(templates: Option<&Path>) -> Result<tera::Tera> {
    let mut t = tera::Tera::default();
    t.autoescape_on(vec![]);
    let mut sources: BTreeMap<String, String> = TEMPLATES.iter().map(|(n, s)| (n.to_string(), s.to_string())).collect();
    if let Some(dir) = templates {
        let entries = std::fs::read_dir(dir).map_err(|e| Error::io(dir, "read the template folder", e))?;
        for entry in entries.flatten() {
            let name = entry.file_name().to_string_lossy().into_owned();
            if name.ends_with(".tera") {
                let text = std::fs::read_to_string(entry.path()).map_err(|e| Error::io(entry.path(), "read the template", e))?;
                sources.insert(name, text);
            }
        }
    }
    t.add_raw_templates(sources.into_iter().collect::<Vec<_>>()).map_err(|e| Error::Usage(format!("card template: {e:?}")))?;
    Ok(t)
}

/// Renders the card text and figures from a results folder without writing anything.
pub(crate) fn render(layout: &Layout, templates: Option<&Path>, results_digest: &str) -> Result<(String, Vec<(String, String)>)> {
    let (mut context, figs) = build(layout)?;
    context.provenance.results_digest = results_digest.to_string();
    let ctx = tera::Context::from_serialize(&context).map_err(|e| Error::Internal(format!("card context: {e}")))?;
    let text = tera(templates)?.render("card.md.tera", &ctx).map_err(|e| {
        let mut msg = e.to_string();
        let mut source = std::error::Error::source(&e);
        while let Some(s) = source {
            msg.push_str(&format!(": {s}"));
            source = s.source();
        }
        Error::Usage(format!("rendering the card: {msg}"))
    })?;
    Ok((text, figs.into_iter().map(|(f, _, svg)| (f, svg)).collect()))
}

/// Renders and writes `card.md` and `figures/` (atomically, file by file), naming the results
/// digest of the evidence, and seals the folder's integrity list. Returns the digest.
pub(crate) fn write_card(layout: &Layout, templates: Option<&Path>) -> Result<String> {
    crate::store::integrity::seal(&layout.root, |digest| {
        let (text, figs) = render(layout, templates, digest)?;
        crate::store::create_dir(&layout.figures())?;
        for (name, svg) in figs {
            write_atomic(&layout.figures().join(name), svg.as_bytes())?;
        }
        write_atomic(&layout.card(), text.as_bytes())
    })
}

/// A finding as the sentence it is after its bold title: the first letter upper-case.
fn sentence_case(text: &str) -> String {
    let mut chars = text.chars();
    match chars.next() {
        Some(first) => first.to_uppercase().chain(chars).collect(),
        None => String::new(),
    }
}
