//! What each column is for (target, feature, id, group, dropped), decided from the manifest and
//! checked against the table: missing columns, an unusable target, empty, all-null or non-finite
//! features are errors naming the file and the column. Roles come from the column names alone
//! ([`resolve_names`]); each feature's values and the target are checked one column at a time.

use std::path::Path;

use super::table::{Column, ColumnValues, Table};
use crate::error::{Error, Result};
use crate::manifest::locate::nearest;
use crate::manifest::{Manifest, Task};

#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
pub struct Feature {
    pub name: String,
    pub categorical: bool,
}

/// The encoded target: class indices into sorted labels, or numeric values.
#[derive(Debug, Clone, PartialEq)]
pub enum Target {
    /// `labels[0]` is the negative class of a binary task and `labels[1]` the positive one.
    Classes {
        labels: Vec<String>,
        rows: Vec<usize>,
    },
    Values(Vec<f64>),
}

impl Target {
    pub fn class_count(&self) -> usize {
        match self {
            Target::Classes { labels, .. } => labels.len(),
            Target::Values(_) => 0,
        }
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Roles {
    pub target: String,
    pub features: Vec<Feature>,
    pub ids: Vec<String>,
    pub groups: Vec<String>,
    pub dropped: Vec<String>,
    /// The column that assigns rows to splits (`split.column`), never a feature.
    pub split_column: Option<String>,
    /// The column whose rows stay in one split (`split.group`), never a feature.
    pub split_group: Option<String>,
    /// Each feature's position in `features`, so lookups stay constant-time on tables of
    /// thousands of columns.
    pub feature_index: std::collections::HashMap<String, usize>,
}

impl Roles {
    /// Whether `column` is a feature.
    pub fn is_feature(&self, column: &str) -> bool {
        self.feature_index.contains_key(column)
    }

    /// The feature named `column`, if it is one.
    pub fn feature(&self, column: &str) -> Option<&Feature> {
        self.feature_index.get(column).map(|&i| &self.features[i])
    }

    pub fn role_of(&self, column: &str) -> Role {
        if column == self.target {
            Role::Target
        } else if self.is_feature(column) {
            Role::Feature
        } else if self.ids.iter().any(|c| c == column) {
            Role::Id
        } else if self.groups.iter().any(|c| c == column) {
            Role::Group
        } else if self.split_column.as_deref() == Some(column) {
            Role::Split
        } else if self.split_group.as_deref() == Some(column) {
            Role::SplitGroup
        } else {
            Role::NotUsed
        }
    }
}

/// What a column is for in an experiment, as the data summary records it (the stored names are
/// the serde renames, unchanged since results layout 2).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum Role {
    #[serde(rename = "target")]
    Target,
    #[serde(rename = "feature")]
    Feature,
    #[serde(rename = "id")]
    Id,
    #[serde(rename = "group")]
    Group,
    #[serde(rename = "split")]
    Split,
    #[serde(rename = "split group")]
    SplitGroup,
    #[serde(rename = "not used")]
    NotUsed,
}

impl Role {
    /// The role as the card and `check` print it (and as it is stored).
    pub fn as_str(self) -> &'static str {
        match self {
            Role::Target => "target",
            Role::Feature => "feature",
            Role::Id => "id",
            Role::Group => "group",
            Role::Split => "split",
            Role::SplitGroup => "split group",
            Role::NotUsed => "not used",
        }
    }
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.pad(self.as_str())
    }
}

fn require_column(names: &[String], present: &std::collections::HashSet<&str>, file: &Path, name: &str, key: &str) -> Result<()> {
    if present.contains(name) {
        return Ok(());
    }
    let hint = nearest(name, names.iter().map(String::as_str)).map(|n| format!(" (did you mean `{n}`?)")).unwrap_or_default();
    Err(Error::data(file, Some(name), format!("named by {key} but not in the file{hint}")))
}

/// Resolves column roles and encodes the target of a table in memory.
pub fn resolve(m: &Manifest, table: &Table, file: &Path) -> Result<(Roles, Target)> {
    if table.rows == 0 {
        return Err(Error::data(file, None, "has no rows"));
    }
    let names: Vec<String> = table.columns.iter().map(|c| c.name.clone()).collect();
    let roles = resolve_names(m, &names, |n| table.column(n).is_some_and(Column::is_text), file)?;
    for f in &roles.features {
        if let Some(col) = table.column(&f.name) {
            check_feature(col, file)?;
        }
    }
    let col = table.column(&m.data.target).ok_or_else(|| Error::data(file, Some(&m.data.target), "is missing"))?;
    let target = encode_target(m, col, file)?;
    Ok((roles, target))
}

/// Resolves column roles from the file's column names (in file order) and which of them hold
/// text: every name the manifest gives must be a column.
pub fn resolve_names(m: &Manifest, names: &[String], is_text: impl Fn(&str) -> bool, file: &Path) -> Result<Roles> {
    let d = &m.data;
    let present: std::collections::HashSet<&str> = names.iter().map(String::as_str).collect();
    require_column(names, &present, file, &d.target, "data.target")?;
    for (list, key) in [
        (&d.features, "data.features"),
        (&d.drop, "data.drop"),
        (&d.ids, "data.ids"),
        (&d.categorical, "data.categorical"),
        (&d.group_columns, "data.group_columns"),
    ] {
        for name in list {
            require_column(names, &present, file, name, key)?;
        }
    }
    let split = &m.split;
    for (name, key) in [(&split.column, "split.column"), (&split.group, "split.group")] {
        if let Some(name) = name {
            require_column(names, &present, file, name, key)?;
        }
    }
    fn listed(list: &[String]) -> std::collections::HashSet<&str> {
        list.iter().map(String::as_str).collect()
    }
    let (drop, ids, groups, categorical) = (listed(&d.drop), listed(&d.ids), listed(&d.group_columns), listed(&d.categorical));
    let excluded = |name: &str| {
        name == d.target
            || drop.contains(name)
            || ids.contains(name)
            || groups.contains(name)
            || split.column.as_deref() == Some(name)
            || split.group.as_deref() == Some(name)
    };
    let feature_names: Vec<String> =
        if d.features.is_empty() { names.iter().filter(|n| !excluded(n)).cloned().collect() } else { d.features.clone() };
    if feature_names.is_empty() {
        return Err(Error::data(file, None, "no feature columns remain after removing the target, ids, groups and dropped columns"));
    }
    let features: Vec<Feature> = feature_names
        .into_iter()
        .map(|name| {
            let categorical = is_text(&name) || categorical.contains(name.as_str());
            Feature { name, categorical }
        })
        .collect();
    Ok(Roles {
        feature_index: features.iter().enumerate().map(|(i, f)| (f.name.clone(), i)).collect(),
        target: d.target.clone(),
        features,
        ids: d.ids.clone(),
        groups: d.group_columns.clone(),
        dropped: names.iter().filter(|n| drop.contains(n.as_str())).cloned().collect(),
        split_column: split.column.clone(),
        split_group: split.group.clone(),
    })
}

/// Checks a feature column's values: not every row null, numbers finite and within
/// [`MAX_MAGNITUDE`].
pub fn check_feature(col: &Column, file: &Path) -> Result<()> {
    let name = col.name.as_str();
    if col.null_count() == col.len() {
        return Err(Error::data(file, Some(name), "has no values (every row is null); drop it or fill it"));
    }
    if matches!(col.values, ColumnValues::Float(_) | ColumnValues::Float32(_)) {
        if let Some((row, value)) =
            (0..col.len()).filter(|&r| col.is_valid(r)).find_map(|r| col.number(r).filter(|x| !x.is_finite()).map(|x| (r, x)))
        {
            return Err(Error::data(
                file,
                Some(name),
                format!("row {row} holds {value}; tabcard needs finite numbers (store missing values as nulls)"),
            ));
        }
        if let Some((row, value)) =
            (0..col.len()).filter(|&r| col.is_valid(r)).find_map(|r| col.number(r).filter(|x| x.abs() > MAX_MAGNITUDE).map(|x| (r, x)))
        {
            return Err(Error::data(
                file,
                Some(name),
                format!("row {row} holds {value:e}, beyond ±{MAX_MAGNITUDE:e}, where sums of squares in the statistics could overflow; rescale the column (other units)"),
            ));
        }
    }
    Ok(())
}

/// The largest magnitude a numeric feature may hold: squares and their sums over any table
/// tabcard can hold (below 2^64 rows) stay far inside f64 (1e200 x 2^64 < 1.8e308).
pub const MAX_MAGNITUDE: f64 = 1e100;

/// Encodes the target column `col` for the manifest's task.
pub fn encode_target(m: &Manifest, col: &Column, file: &Path) -> Result<Target> {
    let name = m.data.target.as_str();
    let err = |msg: String| Error::data(file, Some(name), msg);
    let nulls = col.null_count();
    if nulls == col.len() {
        return Err(err("is the target but every value is null".into()));
    }
    if nulls > 0 {
        let first = (0..col.len()).find(|&r| !col.is_valid(r)).unwrap_or(0);
        return Err(err(format!("is the target but has {nulls} missing values (first at row {first}); drop or label those rows")));
    }
    match m.data.task {
        Task::Regression => {
            let values: Vec<f64> = match &col.values {
                ColumnValues::Float(v) => v.clone(),
                ColumnValues::Float32(v) => v.iter().map(|&x| f64::from(x)).collect(),
                ColumnValues::Int(v) => v.iter().map(|&x| x as f64).collect(),
                _ => return Err(err(format!("has type {} but a regression target must be numeric", col.source_type))),
            };
            if let Some(row) = values.iter().position(|x| !x.is_finite()) {
                return Err(err(format!("row {row} holds {}; a regression target must be finite", values[row])));
            }
            if let Some(row) = values.iter().position(|x| x.abs() > MAX_MAGNITUDE) {
                return Err(err(format!("row {row} holds {:e}, beyond ±{MAX_MAGNITUDE:e}, where sums of squares in the statistics could overflow; rescale the target (other units)", values[row])));
            }
            if values.iter().all(|&x| x == values[0]) {
                return Err(err(format!("is constant ({}); there is nothing to predict", values[0])));
            }
            Ok(Target::Values(values))
        }
        task => {
            if let ColumnValues::Float(_) | ColumnValues::Float32(_) = col.values {
                return Err(err(format!(
                    "has type {} but a class label must be a string, integer or boolean (or use task = \"regression\")",
                    col.source_type
                )));
            }
            // Each row's value as an index into `distinct` (first appearance order), without a
            // string per row: integers and booleans through a map, text through its codes.
            let mut distinct: Vec<(i128, String)> = Vec::new();
            let raw: Vec<usize> = match &col.values {
                ColumnValues::Text { codes, levels } => {
                    // Only levels some row holds (a table built in memory may list others).
                    let mut slot = vec![usize::MAX; levels.len()];
                    codes
                        .iter()
                        .map(|&c| {
                            let c = c as usize;
                            if slot[c] == usize::MAX {
                                slot[c] = distinct.len();
                                distinct.push((0, levels[c].clone()));
                            }
                            slot[c]
                        })
                        .collect()
                }
                values => {
                    let number = |row: usize| match values {
                        ColumnValues::Int(v) => v[row],
                        ColumnValues::Bool(v) => v[row] as i64,
                        _ => 0,
                    };
                    let mut seen: super::order::FastMap<i64, usize> = Default::default();
                    (0..col.len())
                        .map(|row| {
                            let v = number(row);
                            *seen.entry(v).or_insert_with(|| {
                                distinct.push((v as i128, col.label(row).unwrap_or_default()));
                                distinct.len() - 1
                            })
                        })
                        .collect()
                }
            };
            // Distinct labels in their natural order: numeric for integers, false < true, text sorted.
            let mut order: Vec<usize> = (0..distinct.len()).collect();
            order.sort_by(|&a, &b| distinct[a].cmp(&distinct[b]));
            let sorted: Vec<&(i128, String)> = order.iter().map(|&i| &distinct[i]).collect();
            let mut labels: Vec<String> = sorted.iter().map(|(_, s)| s.clone()).collect();
            if labels.len() == 1 {
                return Err(err(format!("is constant (every row is `{}`); there is nothing to predict", labels[0])));
            }
            if task == Task::Binary {
                if labels.len() != 2 {
                    return Err(err(format!(
                        "has {} distinct values but task = \"binary\" needs exactly 2 (use \"multiclass\")",
                        labels.len()
                    )));
                }
                if let Some(pos) = &m.data.positive_label {
                    match labels.iter().position(|l| l == pos) {
                        Some(0) => labels.swap(0, 1),
                        Some(_) => {}
                        None => return Err(err(format!("has no value `{pos}` named by data.positive_label; its values are {labels:?}"))),
                    }
                }
                if let Some(favourable) = m.decision.as_ref().and_then(|d| d.favourable.as_ref()) {
                    if !labels.contains(favourable) {
                        return Err(err(format!("has no value `{favourable}` named by decision.favourable; its values are {labels:?}")));
                    }
                }
            } else if labels.len() == 2 {
                return Err(err("has 2 distinct values; use task = \"binary\"".into()));
            }
            let index: Vec<usize> = distinct.iter().map(|k| labels.iter().position(|l| *l == k.1).unwrap_or(0)).collect();
            let rows: Vec<usize> = raw.into_iter().map(|r| index[r]).collect();
            let mut counts = vec![0usize; labels.len()];
            for &c in &rows {
                counts[c] += 1;
            }
            if let Some(c) = counts.iter().position(|&n| n < 2) {
                return Err(err(format!(
                    "class `{}` has a single row; every class needs at least 2 rows to appear in training and evaluation",
                    labels[c]
                )));
            }
            Ok(Target::Classes { labels, rows })
        }
    }
}
