//! The first pass over an experiment's data, one column at a time and then one chunk of rows at a
//! time, never holding the decoded table: the content hash, column roles and their checks, the
//! target, the split, the data summary, what the split lets through, and the preprocessing fitted
//! on the training rows. What it keeps grows with the rows (target, split, one digest per row),
//! not with rows x columns. The second pass, building the matrices, is
//! [`Preprocessor::transform_source`].

use std::collections::HashMap;

use super::leakage::{self, KeyCrossing, SplitChecks};
use super::prep::{fit_feature, InputEncoding, Preprocessor};
use super::roles::{check_feature, encode_target, resolve_names, Roles, Target};
use super::source::ColumnSource;
use super::split::{split_by, Splits};
use super::summary::{assemble, summarise_column, DataSummary};
use super::table::ContentHasher;
use crate::error::{Error, Result};
use crate::manifest::Manifest;

/// Everything the first pass learns.
#[derive(Debug, Clone, PartialEq)]
pub struct Scan {
    pub rows: usize,
    pub columns: usize,
    /// SHA-256 of the schema and values in row order ([`super::table::Table::content_hash`]).
    pub content_sha256: String,
    pub roles: Roles,
    pub target: Target,
    pub summary: DataSummary,
    pub splits: Splits,
    /// Fitted on the training rows.
    pub preprocessor: Preprocessor,
}

/// Scans `source` for the experiment `m` describes.
pub fn scan(m: &Manifest, source: &dyn ColumnSource) -> Result<Scan> {
    let file = source.path();
    let rows = source.rows();
    if rows == 0 {
        return Err(Error::data(file, None, "has no rows"));
    }
    let names = source.names();
    let roles = resolve_names(m, &names, |n| source.is_text(n), file)?;
    let target = encode_target(m, &*source.column(&roles.target)?, file)?;
    let splits = match m.split.column.as_ref().or(m.split.group.as_ref()) {
        Some(name) => split_by(&target, &m.split, Some(&*source.column(name)?), file)?,
        None => split_by(&target, &m.split, None, file)?,
    };

    // One column at a time, in table order (the content hash needs that order).
    let keys = leakage::key_columns(&roles);
    let mut hasher = ContentHasher::new(rows, names.len());
    let mut summaries = Vec::with_capacity(names.len());
    let mut encodings: HashMap<&str, InputEncoding> = HashMap::new();
    let mut constant: Vec<&str> = Vec::new();
    let mut crossings: HashMap<&str, KeyCrossing> = HashMap::new();
    for name in &names {
        let col = source.column(name)?;
        hasher.add(&col);
        let feature = roles.features.iter().find(|f| f.name == *name);
        if let Some(f) = feature {
            check_feature(&col, file)?;
            if leakage::constant_on_training(&col, &splits.train) {
                constant.push(name);
            }
            encodings.insert(name, fit_feature(&col, f, &splits.train, file)?);
        }
        if keys.contains(name) {
            if let Some(crossing) = leakage::key_crossing(&col, &splits) {
                crossings.insert(name, crossing);
            }
        }
        summaries.push(summarise_column(&col, &roles, feature.is_some_and(|f| f.categorical)));
    }

    // Then the rows, a chunk at a time, for their digests over the features and the target.
    let seen: Vec<&str> =
        names.iter().filter(|n| **n == roles.target || roles.features.iter().any(|f| f.name == **n)).map(String::as_str).collect();
    let mut digests = Vec::with_capacity(rows);
    source.for_each_chunk(&seen, &mut |_, chunk| {
        digests.extend(leakage::row_digests(chunk, &roles));
        Ok(())
    })?;
    let (test_rows_duplicating_training, validation_rows_duplicating_training) = leakage::rows_duplicating_training(&splits, &digests);
    let mut summary = assemble(rows, summaries, &roles, &target, leakage::duplicate_rows(&digests));
    drop(digests);
    summary.split_checks = Some(SplitChecks {
        test_rows_duplicating_training,
        validation_rows_duplicating_training,
        // In feature order, as the checks list them.
        constant_on_training: roles.features.iter().filter(|f| constant.contains(&f.name.as_str())).map(|f| f.name.clone()).collect(),
        repeated_keys: keys.iter().filter_map(|k| crossings.remove(k.as_str())).collect(),
    });
    let inputs = roles
        .features
        .iter()
        .map(|f| encodings.get(f.name.as_str()).cloned().ok_or_else(|| Error::data(file, Some(&f.name), "is not in the file")))
        .collect::<Result<Vec<_>>>()?;
    Ok(Scan {
        rows,
        columns: names.len(),
        content_sha256: hasher.finish(),
        roles,
        target,
        summary,
        splits,
        preprocessor: Preprocessor::from_inputs(inputs),
    })
}
