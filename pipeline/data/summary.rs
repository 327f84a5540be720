//! The data summary shown by `check` and in the card: per-column type, missing values, numeric
//! statistics or category levels, the target's balance or distribution, and data warnings. Built
//! one column at a time ([`summarise_column`], then [`assemble`]), so no statistic needs the whole
//! table. Every statistic is exact: quantiles by selection, distinct counts by hashing; means and
//! standard deviations are compensated sums in row order.

use serde::{Deserialize, Serialize};

use super::leakage::{duplicate_rows, SplitChecks};

use super::order;
use super::roles::{Role, Roles, Target};
use super::table::{Column, ColumnValues, Table};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NumericStats {
    pub min: f64,
    pub max: f64,
    pub mean: f64,
    pub std: f64,
    pub q25: f64,
    pub median: f64,
    pub q75: f64,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LevelCount {
    pub level: String,
    pub count: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ColumnSummary {
    pub name: String,
    pub kind: String,
    pub source_type: String,
    pub role: Role,
    pub categorical: bool,
    pub missing: usize,
    pub missing_share: f64,
    pub distinct: usize,
    pub numeric: Option<NumericStats>,
    /// The most frequent levels (at most 5), for categorical columns.
    pub top_levels: Vec<LevelCount>,
    /// Levels with fewer than `RARE_LEVEL_ROWS` rows.
    pub rare_levels: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct TargetSummary {
    pub name: String,
    /// Rows per class (classification), in label order.
    pub classes: Vec<LevelCount>,
    /// Distribution of a regression target.
    pub distribution: Option<NumericStats>,
}

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct DataSummary {
    pub rows: usize,
    /// Rows identical (features and target) to an earlier row; `None` in folders of tabcard 0.3,
    /// which did not count them.
    #[serde(default)]
    pub duplicate_rows: Option<usize>,
    pub columns: Vec<ColumnSummary>,
    pub target: TargetSummary,
    pub warnings: Vec<String>,
    /// What the split lets through (filled in once the rows are split); `None` in folders of
    /// tabcard 0.3, which did not check.
    #[serde(default)]
    pub split_checks: Option<SplitChecks>,
}

/// A level seen in fewer rows than this is "rare" (common practice: too few rows to learn an
/// effect from).
pub const RARE_LEVEL_ROWS: usize = 10;
/// A column with more than this share missing is flagged (common practice).
pub const MOSTLY_MISSING_SHARE: f64 = 0.5;

/// Statistics of the values in any order. The mean and the standard deviation
/// (n - 1 in the denominator) are compensated sums in the order given, the quantiles numpy's
/// "linear" ones, found by selection.
pub fn numeric_stats(values: Vec<f64>) -> Option<NumericStats> {
    let (min, max) = order::min_max(&values)?;
    let n = values.len() as f64;
    let mean = order::sum(values.iter().copied()) / n;
    let var = if values.len() > 1 { order::sum(values.iter().map(|x| (x - mean).powi(2))) / (n - 1.0) } else { 0.0 };
    let [q25, median, q75] = order::quantiles(&values, [0.25, 0.5, 0.75]);
    Some(NumericStats { min, max, mean, std: var.sqrt(), q25, median, q75 })
}

/// Level counts of a column read as categories, most frequent first (ties by label).
pub fn level_counts(col: &Column) -> Vec<LevelCount> {
    let mut counts: std::collections::BTreeMap<String, usize> = Default::default();
    if let ColumnValues::Text { codes, levels } = &col.values {
        let mut by_code = vec![0usize; levels.len()];
        for (row, &c) in codes.iter().enumerate() {
            if col.is_valid(row) {
                by_code[c as usize] += 1;
            }
        }
        for (l, n) in levels.iter().zip(by_code) {
            if n > 0 {
                counts.insert(l.clone(), n);
            }
        }
    } else {
        for row in 0..col.len() {
            if let Some(l) = col.label(row) {
                *counts.entry(l).or_default() += 1;
            }
        }
    }
    let mut v: Vec<LevelCount> = counts.into_iter().map(|(level, count)| LevelCount { level, count }).collect();
    v.sort_by(|a, b| b.count.cmp(&a.count).then_with(|| a.level.cmp(&b.level)));
    v
}

/// One column's summary; `categorical` when the column is a feature read as categories.
pub fn summarise_column(col: &Column, roles: &Roles, categorical: bool) -> ColumnSummary {
    let rows = col.len();
    let missing = col.null_count();
    let (numeric, top_levels, distinct, rare_levels) = if categorical || col.is_text() {
        let levels = level_counts(col);
        let rare = levels.iter().filter(|l| l.count < RARE_LEVEL_ROWS).count();
        (None, levels.iter().take(5).cloned().collect(), levels.len(), rare)
    } else {
        let values: Vec<f64> = (0..col.len()).filter_map(|r| col.number(r)).collect();
        let distinct = order::distinct(&values);
        (numeric_stats(values), Vec::new(), distinct, 0)
    };
    ColumnSummary {
        name: col.name.clone(),
        kind: col.kind_name().to_string(),
        source_type: col.source_type.clone(),
        role: roles.role_of(&col.name),
        categorical: categorical || col.is_text(),
        missing,
        missing_share: if rows == 0 { 0.0 } else { missing as f64 / rows as f64 },
        distinct,
        numeric,
        top_levels,
        rare_levels,
    }
}

/// Summarises every column of a table in memory: [`summarise_column`] for each, then [`assemble`].
pub fn summarise(table: &Table, roles: &Roles, target: &Target, row_digests: &[u128]) -> DataSummary {
    let columns: Vec<ColumnSummary> = table
        .columns
        .iter()
        .map(|c| {
            let categorical = roles.feature(&c.name).is_some_and(|f| f.categorical);
            summarise_column(c, roles, categorical)
        })
        .collect();
    assemble(table.rows, columns, roles, target, duplicate_rows(row_digests))
}

/// The summary from its column summaries (in table order), the target and the duplicate count
/// (`leakage::duplicate_rows`), with the warnings a reviewer should see.
pub fn assemble(rows: usize, columns: Vec<ColumnSummary>, roles: &Roles, target: &Target, duplicates: usize) -> DataSummary {
    let mut warnings = Vec::new();
    for c in columns.iter().filter(|c| c.role == Role::Feature) {
        if c.distinct <= 1 {
            warnings.push(format!("feature `{}` is constant: it carries no information", c.name));
        }
        if c.distinct == rows && rows > 20 && (c.kind == "integer" || c.kind == "string") {
            warnings.push(format!("feature `{}` is unique per row, like an identifier: consider listing it in data.ids", c.name));
        }
        if c.missing_share > MOSTLY_MISSING_SHARE {
            warnings.push(format!(
                "feature `{}` is missing in {:.1}% of rows (more than {:.0}%, common practice)",
                c.name,
                100.0 * c.missing_share,
                100.0 * MOSTLY_MISSING_SHARE
            ));
        }
    }
    let target_summary = match target {
        Target::Classes { labels, rows } => {
            let mut counts = vec![0usize; labels.len()];
            for &c in rows {
                counts[c] += 1;
            }
            TargetSummary {
                name: roles.target.clone(),
                classes: labels.iter().zip(counts).map(|(l, n)| LevelCount { level: l.clone(), count: n }).collect(),
                distribution: None,
            }
        }
        Target::Values(v) => TargetSummary { name: roles.target.clone(), classes: Vec::new(), distribution: numeric_stats(v.clone()) },
    };
    if duplicates > 0 {
        warnings.push(format!("{duplicates} rows repeat an earlier row exactly (features and target)"));
    }
    DataSummary { rows, duplicate_rows: Some(duplicates), columns, target: target_summary, warnings, split_checks: None }
}
