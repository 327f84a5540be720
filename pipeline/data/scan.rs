//! The first pass over an experiment's data, one column at a time and then one chunk of rows at a
//! time, never holding the decoded table: the content hash, column roles and their checks, the
//! target, the split, the data summary, what the split lets through, and the preprocessing fitted
//! on the training rows. What it keeps grows with the rows (target, split, one digest per row),
//! not with rows x columns. The second pass, building the matrices, is
//! [`Preprocessor::transform_source`].

use rayon::prelude::*;
use std::collections::HashMap;
use std::path::Path;

use super::bins::{binned_training_column, BinnedColumn};
use super::leakage::{self, KeyCrossing, SplitChecks};
use super::prep::{fit_feature, InputEncoding, Preprocessor};
use super::roles::{check_feature, encode_target, resolve_names, Roles, Target};
use super::source::ColumnSource;
use super::split::{split_by, Splits};
use super::summary::{assemble, summarise_column, ColumnSummary, DataSummary};
use super::table::{Column, ContentHasher};
use crate::error::{Error, Result};
use crate::manifest::Manifest;

/// Everything the first pass learns.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Scan {
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
    /// Every input's bins and counts on the training rows, in input order: the features of the
    /// monitoring profile (`bins.rs`), binned while each column is in memory.
    pub training_profile: Vec<BinnedColumn>,
}

/// What one column contributes.
struct Findings {
    summary: ColumnSummary,
    /// Features only, with its bins on the training rows.
    encoding: Option<(InputEncoding, BinnedColumn)>,
    constant_on_training: bool,
    /// Key columns only, when a value repeats.
    crossing: Option<KeyCrossing>,
}

fn findings_of(col: &Column, roles: &Roles, keys: &[String], splits: &Splits, file: &Path) -> Result<Findings> {
    let feature = roles.feature(&col.name);
    let mut found = Findings {
        summary: summarise_column(col, roles, feature.is_some_and(|f| f.categorical)),
        encoding: None,
        constant_on_training: false,
        crossing: None,
    };
    if let Some(f) = feature {
        check_feature(col, file)?;
        found.constant_on_training = leakage::constant_on_training(col, &splits.train);
        let encoding = fit_feature(col, f, &splits.train, file)?;
        let binned = binned_training_column(&encoding, col, &splits.train);
        found.encoding = Some((encoding, binned));
    }
    if keys.contains(&col.name) {
        found.crossing = leakage::key_crossing(col, splits);
    }
    Ok(found)
}

/// Working memory of one first-pass thread per row: one decoded column and its working copies.
pub(crate) const SCAN_BYTES_PER_ROW: u64 = 32;

/// Scans `source` for the experiment `m` describes, on its own pool of as many threads as the
/// process may use and the memory allows ([`crate::threads::helper_pool`]; the process-wide pool
/// stays single-threaded). Every result is the same whatever the thread count.
pub(crate) fn scan(m: &Manifest, source: &(dyn ColumnSource + Sync)) -> Result<Scan> {
    let per_thread = SCAN_BYTES_PER_ROW.saturating_mul(source.rows() as u64);
    crate::threads::helper_pool(per_thread, "read the data")?.install(|| scan_in(m, source))
}

fn scan_in(m: &Manifest, source: &(dyn ColumnSource + Sync)) -> Result<Scan> {
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

    // A few columns at a time, at least as many as there are worker threads (more on short
    // tables, see `columns_per_read`): read in table order (the content hash needs that order)
    // and hashed on one thread while the others check, summarise and fit them. Each column's findings depend on that column alone, so the thread count
    // changes no result, and the first error in table order is the one reported.
    let keys = leakage::key_columns(&roles);
    let mut hasher = ContentHasher::new(rows, names.len());
    let mut summaries = Vec::with_capacity(names.len());
    let mut encodings: HashMap<&str, (InputEncoding, BinnedColumn)> = HashMap::new();
    let mut constant: std::collections::HashSet<&str> = std::collections::HashSet::new();
    let mut crossings: HashMap<&str, KeyCrossing> = HashMap::new();
    let per_read = super::source::columns_per_read(rows, rayon::current_num_threads());
    let windows: Vec<&[String]> = names.chunks(per_read).collect();
    let read = |window: Option<&&[String]>| -> Result<Vec<_>> {
        match window {
            Some(window) => source.columns(&window.iter().map(String::as_str).collect::<Vec<_>>()),
            None => Ok(Vec::new()),
        }
    };
    // The next window is read (one read at a time, in table order) while this one is hashed and
    // examined.
    let mut next = read(windows.first())?;
    for (i, window) in windows.iter().enumerate() {
        let columns = std::mem::take(&mut next);
        let (read_next, (_, findings)) = rayon::join(
            || read(windows.get(i + 1)),
            || {
                rayon::join(
                    || columns.iter().for_each(|col| hasher.add(col)),
                    || columns.par_iter().map(|col| findings_of(col, &roles, &keys, &splits, file)).collect::<Vec<_>>(),
                )
            },
        );
        for (name, found) in window.iter().zip(findings) {
            let found = found?;
            if let Some(encoding) = found.encoding {
                encodings.insert(name, encoding);
            }
            if found.constant_on_training {
                constant.insert(name);
            }
            if let Some(crossing) = found.crossing {
                crossings.insert(name, crossing);
            }
            summaries.push(found.summary);
        }
        // After this window's findings, so that the first error in table order is reported.
        next = read_next?;
    }

    // Then the rows, a chunk at a time, for their digests over the features and the target.
    let seen: Vec<&str> = names.iter().filter(|n| **n == roles.target || roles.is_feature(n)).map(String::as_str).collect();
    let mut digests = Vec::with_capacity(rows);
    source.for_each_chunk(&seen, &mut |_, chunk| {
        digests.extend(leakage::row_digests(chunk, &roles));
        Ok(())
    })?;
    let ((test_rows_duplicating_training, validation_rows_duplicating_training), duplicates) =
        rayon::join(|| leakage::rows_duplicating_training(&splits, &digests), || leakage::duplicate_rows(&digests));
    let mut summary = assemble(rows, summaries, &roles, &target, duplicates);
    drop(digests);
    summary.split_checks = Some(SplitChecks {
        test_rows_duplicating_training,
        validation_rows_duplicating_training,
        // In feature order, as the checks list them.
        constant_on_training: roles.features.iter().filter(|f| constant.contains(&f.name.as_str())).map(|f| f.name.clone()).collect(),
        repeated_keys: keys.iter().filter_map(|k| crossings.remove(k.as_str())).collect(),
    });
    let (inputs, training_profile): (Vec<InputEncoding>, Vec<BinnedColumn>) = roles
        .features
        .iter()
        .map(|f| encodings.remove(f.name.as_str()).ok_or_else(|| Error::data(file, Some(&f.name), "is not in the file")))
        .collect::<Result<Vec<_>>>()?
        .into_iter()
        .unzip();
    Ok(Scan {
        rows,
        columns: names.len(),
        content_sha256: hasher.finish(),
        roles,
        target,
        summary,
        splits,
        preprocessor: Preprocessor::from_inputs(inputs),
        training_profile,
    })
}
