//! The data section: source, fingerprints, rows and split, columns, target classes, warnings
//! and the preprocessing fitted on the training rows.

use serde::Serialize;
use std::path::Path;

use crate::data::prep::{InputEncoding, Preprocessor};
use crate::format::{fixed, sig};
use crate::manifest::{Manifest, Task};
use crate::results::StoredResults;
use crate::text::{code_span, markdown_safe as md};

use crate::card::cells::{list, Row};

/// The data section: source, split, columns, target and how features became inputs.
#[derive(Serialize)]
pub(crate) struct DataSection {
    pub(crate) path: String,
    /// How `path` is to be read: relative to the manifest, or absolute.
    pub(crate) path_base: String,
    pub(crate) bytes: u64,
    pub(crate) outside_project: bool,
    file_sha256: String,
    content_sha256: String,
    pub(crate) rows: usize,
    pub(crate) duplicate_rows: String,
    pub(crate) split: [usize; 3],
    pub(crate) split_method: String,
    pub(crate) column_rows: Vec<Row>,
    pub(crate) class_rows: Vec<Row>,
    pub(crate) target_rows: Vec<Row>,
    pub(crate) warnings: Vec<String>,
    pub(crate) preprocessing: String,
    pub(crate) encoding_rows: Vec<Row>,
    pub(crate) group_note: String,
}

pub(crate) fn split_method(m: &Manifest) -> String {
    let s = &m.split;
    match (&s.column, &s.group) {
        (Some(c), _) => format!(
            "given by column {} (train {}, validation {}, test {})",
            code_span(c),
            list(&s.labels.train),
            list(&s.labels.validation),
            list(&s.labels.test)
        ),
        (None, Some(g)) => format!(
            "seeded by whole groups of {}: every row of one value in one split{}, split seed {}",
            code_span(g),
            if s.stratify && m.data.task != Task::Regression { ", groups stratified by their most common class" } else { "" },
            s.seed
        ),
        (None, None) if s.stratify && m.data.task != Task::Regression => {
            format!("seeded by rows, stratified by class, split seed {}", s.seed)
        }
        (None, None) => format!("seeded by rows, split seed {}", s.seed),
    }
}

/// How the features became the network's inputs, in one sentence and one row per feature.
pub(crate) fn preprocessing(p: &Preprocessor) -> (String, Vec<Row>) {
    let mut rows = Vec::new();
    let (mut numeric, mut numeric_flag, mut categorical, mut categorical_flag) = (0, 0, 0, 0);
    for input in &p.inputs {
        match input {
            InputEncoding::Numeric { name, impute, mean, scale, indicator, .. } => {
                numeric += 1;
                numeric_flag += *indicator as usize;
                let missing = if *indicator {
                    format!("; missing → training median {} plus a missing flag", sig(*impute, 4))
                } else {
                    String::new()
                };
                rows.push(Row::of([
                    md(name),
                    format!("numeric, standardised: (x − {}) / {}{missing}", sig(*mean, 4), sig(*scale, 4)),
                    (1 + *indicator as usize).to_string(),
                ]));
            }
            InputEncoding::Categorical { name, levels, impute, indicator } => {
                categorical += 1;
                categorical_flag += *indicator as usize;
                let missing = if *indicator {
                    format!(
                        "; missing → most frequent level {} plus a missing flag",
                        levels.get(*impute).map(|l| code_span(l)).unwrap_or_default()
                    )
                } else {
                    String::new()
                };
                rows.push(Row::of([
                    md(name),
                    format!("one-hot over {} training levels plus one column for levels unseen in training{missing}", levels.len()),
                    (levels.len() + 1 + *indicator as usize).to_string(),
                ]));
            }
        }
    }
    let line = format!(
        "{} features became {} network inputs, fitted on the training rows only: {numeric} numeric (standardised by training mean and standard deviation; {numeric_flag} with a missing flag) and {categorical} categorical (one-hot plus an unseen-level column; {categorical_flag} with a missing flag).",
        p.inputs.len(),
        p.width()
    );
    (line, rows)
}

pub(crate) fn data_section(st: &StoredResults) -> DataSection {
    let (summary, record) = (&st.summary, &st.record);
    let column_rows = summary
        .columns
        .iter()
        .map(|c| {
            let detail = match &c.numeric {
                Some(n) if c.kind == "boolean" => format!("true in {}% of rows", fixed(100.0 * n.mean, 1)),
                Some(n) => format!("{} to {} (median {})", sig(n.min, 4), sig(n.max, 4), sig(n.median, 4)),
                None => {
                    let top: Vec<String> = c.top_levels.iter().take(3).map(|l| format!("{} ({})", md(&l.level), l.count)).collect();
                    format!("{} levels; most frequent {}", c.distinct, top.join(", "))
                }
            };
            let kind = if c.categorical { format!("{} (categorical)", c.kind) } else { c.kind.clone() };
            Row::of([md(&c.name), c.role.to_string(), kind, format!("{} ({}%)", c.missing, fixed(100.0 * c.missing_share, 1)), detail])
        })
        .collect();
    let class_rows = summary
        .target
        .classes
        .iter()
        .map(|l| {
            Row::of([md(&l.level), l.count.to_string(), format!("{}%", fixed(100.0 * l.count as f64 / summary.rows.max(1) as f64, 1))])
        })
        .collect();
    let target_rows = summary
        .target
        .distribution
        .iter()
        .flat_map(|d| {
            [
                ("mean", d.mean),
                ("standard deviation", d.std),
                ("minimum", d.min),
                ("25th percentile", d.q25),
                ("median", d.median),
                ("75th percentile", d.q75),
                ("maximum", d.max),
            ]
            .map(|(name, v)| Row::of([name.to_string(), sig(v, 4)]))
        })
        .collect();
    let (preprocessing, encoding_rows) = preprocessing(&st.preprocessor);
    let group_note = if st.manifest.data.group_columns.is_empty() {
        String::new()
    } else {
        format!(
            "Columns with the role \"group\" ({}) describe groups of people; they are not network inputs and serve only the per-group test results below.",
            st.manifest.data.group_columns.iter().map(|g| md(g)).collect::<Vec<_>>().join(", ")
        )
    };
    DataSection {
        path: code_span(&record.data.path),
        path_base: if Path::new(&record.data.path).is_absolute() {
            "an absolute path: it names one machine's file, not one that travels with the project".into()
        } else {
            "relative to the manifest".into()
        },
        bytes: record.data.bytes,
        outside_project: record.location.data_outside_project,
        file_sha256: record.data.file_sha256.clone(),
        content_sha256: record.data.content_sha256.clone(),
        rows: summary.rows,
        duplicate_rows: match summary.duplicate_rows {
            Some(n) => format!("of which {n} repeat an earlier row exactly (features and target)"),
            None => "duplicates not counted by the tabcard version that wrote these results".into(),
        },
        split: record.split_rows,
        split_method: split_method(&st.manifest),
        column_rows,
        class_rows,
        target_rows,
        warnings: summary.warnings.iter().map(|w| md(w)).collect(),
        preprocessing,
        encoding_rows,
        group_note,
    }
}
