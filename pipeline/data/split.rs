//! The split of rows into training, validation and test sets: given by a column, seeded by whole
//! groups, or seeded by rows (stratified by class when asked). Each split lists row indices in
//! ascending order.

use serde::{Deserialize, Serialize};
use std::path::Path;

use std::collections::BTreeMap;

use super::roles::Target;
use super::table::{Column, Table};
use crate::error::{Error, Result};
use crate::manifest::{SplitLabels, SplitSpec};
use crate::rng::{Purpose, Stream};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Splits {
    pub train: Vec<usize>,
    pub validation: Vec<usize>,
    pub test: Vec<usize>,
}

fn cut(mut rows: Vec<usize>, spec: &SplitSpec, stream: &mut Stream, out: &mut Splits) {
    stream.shuffle(&mut rows);
    let n = rows.len() as f64;
    let n_test = (n * spec.test).round() as usize;
    let n_val = ((n * spec.validation).round() as usize).min(rows.len() - n_test);
    out.test.extend_from_slice(&rows[..n_test]);
    out.validation.extend_from_slice(&rows[n_test..n_test + n_val]);
    out.train.extend_from_slice(&rows[n_test + n_val..]);
}

/// Splits the table's rows. With `split.column`, each row goes where its value says; with
/// `split.group`, whole groups are shuffled and cut; otherwise rows are, with the stream
/// `(spec.seed, split)`. Stratified: each class (for groups: each group's most common class) is
/// shuffled and cut separately, classes in label order, so every split keeps the class shares.
pub fn split(table: &Table, target: &Target, spec: &SplitSpec, file: &Path) -> Result<Splits> {
    let name = spec.column.as_ref().or(spec.group.as_ref());
    let column = match name {
        Some(name) => Some(table.column(name).ok_or_else(|| Error::data(file, Some(name), "names no column of the file"))?),
        None => None,
    };
    split_by(target, spec, column, file)
}

/// As [`split`], given only what it reads: the target and the column `split.column` or
/// `split.group` names (`None` when the manifest names neither).
pub fn split_by(target: &Target, spec: &SplitSpec, column: Option<&Column>, file: &Path) -> Result<Splits> {
    let mut out = match (column, &spec.column) {
        (Some(col), Some(_)) => given(col, &spec.labels, file)?,
        (Some(col), None) => grouped(col, target, spec)?,
        (None, _) => seeded(target, spec),
    };
    for (name, part) in [("training", &out.train), ("validation", &out.validation), ("test", &out.test)] {
        if part.is_empty() {
            let why = match (&spec.column, &spec.group) {
                (Some(c), _) => format!("no row of column `{c}` names it (its labels: {:?})", labels_of(&spec.labels, name)),
                (None, Some(g)) => format!("too few groups of `{g}` (validation = {}, test = {})", spec.validation, spec.test),
                _ => format!("validation = {}, test = {}", spec.validation, spec.test),
            };
            return Err(Error::data(
                file,
                spec.column.as_deref().or(spec.group.as_deref()),
                format!("too few rows for the split: the {name} set would be empty ({why})"),
            ));
        }
    }
    out.train.sort_unstable();
    out.validation.sort_unstable();
    out.test.sort_unstable();
    Ok(out)
}

fn labels_of<'a>(labels: &'a SplitLabels, part: &str) -> &'a [String] {
    match part {
        "training" => &labels.train,
        "validation" => &labels.validation,
        _ => &labels.test,
    }
}

fn seeded(target: &Target, spec: &SplitSpec) -> Splits {
    let mut stream = Stream::new(spec.seed, Purpose::Split);
    let mut out = Splits { train: Vec::new(), validation: Vec::new(), test: Vec::new() };
    match target {
        Target::Classes { labels, rows } if spec.stratify => {
            for class in 0..labels.len() {
                let members: Vec<usize> = (0..rows.len()).filter(|&r| rows[r] == class).collect();
                cut(members, spec, &mut stream, &mut out);
            }
        }
        Target::Classes { rows, .. } => cut((0..rows.len()).collect(), spec, &mut stream, &mut out),
        Target::Values(v) => cut((0..v.len()).collect(), spec, &mut stream, &mut out),
    }
    out
}

/// Every row goes where its value of `column` says; a value that names no split, or a null, is
/// an error naming the row.
fn given(col: &Column, labels: &SplitLabels, file: &Path) -> Result<Splits> {
    let column = col.name.as_str();
    let mut out = Splits { train: Vec::new(), validation: Vec::new(), test: Vec::new() };
    for row in 0..col.len() {
        let Some(value) = col.label(row) else {
            return Err(Error::data(file, Some(column), format!("row {row} is null; split.column must name a split for every row")));
        };
        let part = if labels.train.contains(&value) {
            &mut out.train
        } else if labels.validation.contains(&value) {
            &mut out.validation
        } else if labels.test.contains(&value) {
            &mut out.test
        } else {
            return Err(Error::data(file, Some(column), format!(
                "row {row} holds `{}`, which names no split (train: {:?}, validation: {:?}, test: {:?}; set [split.labels] to accept other values)",
                crate::text::terminal_cell(&value, 60), labels.train, labels.validation, labels.test
            )));
        };
        part.push(row);
    }
    Ok(out)
}

/// Whole groups are shuffled and cut by rows: a group goes to test while the test rows before it
/// fall short of the test fraction, then to validation likewise, then to training. Nulls form one
/// group of their own.
fn grouped(col: &Column, target: &Target, spec: &SplitSpec) -> Result<Splits> {
    let mut members: BTreeMap<Option<String>, Vec<usize>> = BTreeMap::new();
    for row in 0..col.len() {
        members.entry(col.label(row)).or_default().push(row);
    }
    // Groups in a fixed order (sorted by value), bucketed by their most common class.
    let buckets: Vec<Vec<Vec<usize>>> = match target {
        Target::Classes { labels, rows } if spec.stratify => {
            let mut by_class = vec![Vec::new(); labels.len()];
            for rows_of_group in members.into_values() {
                let mut counts = vec![0usize; labels.len()];
                for &r in &rows_of_group {
                    counts[rows[r]] += 1;
                }
                let class = (0..labels.len()).max_by_key(|&c| (counts[c], std::cmp::Reverse(c))).unwrap_or(0);
                by_class[class].push(rows_of_group);
            }
            by_class
        }
        _ => vec![members.into_values().collect()],
    };
    let mut stream = Stream::new(spec.seed, Purpose::Split);
    let mut out = Splits { train: Vec::new(), validation: Vec::new(), test: Vec::new() };
    for mut groups in buckets {
        stream.shuffle(&mut groups);
        let rows: usize = groups.iter().map(Vec::len).sum();
        let n_test = rows as f64 * spec.test;
        let n_val = rows as f64 * spec.validation;
        let mut before = 0usize;
        for g in groups {
            let part = if (before as f64) < n_test {
                &mut out.test
            } else if (before as f64) < n_test + n_val {
                &mut out.validation
            } else {
                &mut out.train
            };
            before += g.len();
            part.extend(g);
        }
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn stratified_split_keeps_class_shares_and_covers_every_row() {
        let rows: Vec<usize> = (0..1000).map(|i| (i % 10 == 0) as usize).collect();
        let target = Target::Classes { labels: vec!["n".into(), "y".into()], rows: rows.clone() };
        let spec = SplitSpec { validation: 0.2, test: 0.1, stratify: true, seed: 4, ..SplitSpec::default() };
        let s = seeded(&target, &spec);
        let positives = |idx: &[usize]| idx.iter().filter(|&&r| rows[r] == 1).count();
        assert_eq!((s.train.len(), s.validation.len(), s.test.len()), (700, 200, 100));
        assert_eq!((positives(&s.train), positives(&s.validation), positives(&s.test)), (70, 20, 10));
        let mut all: Vec<usize> = s.train.iter().chain(&s.validation).chain(&s.test).copied().collect();
        all.sort_unstable();
        assert_eq!(all, (0..1000).collect::<Vec<_>>());
        assert_eq!(s, seeded(&target, &spec));
    }
}
