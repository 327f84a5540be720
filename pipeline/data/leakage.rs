//! What a split can let through from training to evaluation: exact duplicate rows (counted over
//! the columns the model sees: features and target), duplicates that sit in training and in an
//! evaluation split, features constant on the training rows, and repeated keys (ids and the split
//! group) whose values occur in more than one split. Each check reads one column, or the rows'
//! digests, so the checks run on a file read a column (or a chunk of rows) at a time.

use super::order::{FastMap, FastSet};
use serde::{Deserialize, Serialize};
use sha2::{Digest, Sha256};

use super::roles::Roles;
use super::split::Splits;
use super::table::{Column, ColumnValues, Table};

/// A repeated key and how many of its values occur in more than one split.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct KeyCrossing {
    pub column: String,
    /// Distinct non-null values.
    pub values: usize,
    /// Values found in two or three splits.
    pub crossing: usize,
    /// Rows outside training whose value also occurs in training.
    pub evaluation_rows_sharing: usize,
}

/// The checks that need the split.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
pub struct SplitChecks {
    /// Test rows identical (features and target) to some training row.
    pub test_rows_duplicating_training: usize,
    /// Validation rows identical to some training row.
    pub validation_rows_duplicating_training: usize,
    /// Features with at most one distinct value among the training rows (nulls aside).
    pub constant_on_training: Vec<String>,
    /// Repeated keys (ids and the split group whose values occur on more than one row) and their
    /// crossings.
    pub repeated_keys: Vec<KeyCrossing>,
}

/// One row's values over `columns` as bytes: equal bytes if and only if equal values (nulls
/// equal each other, `-0.0` equals `0.0`, integers and floats compared as stored).
fn row_key(table: &Table, columns: &[usize], row: usize, out: &mut Vec<u8>) {
    out.clear();
    for &c in columns {
        push_value(&table.columns[c], row, out);
    }
}

/// One value's key bytes (see [`row_key`]), appended to `out`.
fn push_value(col: &Column, row: usize, out: &mut Vec<u8>) {
    if !col.is_valid(row) {
        out.push(0);
        return;
    }
    out.push(1);
    match &col.values {
        ColumnValues::Float(v) => out.extend_from_slice(&(v[row] + 0.0).to_bits().to_le_bytes()),
        ColumnValues::Float32(v) => out.extend_from_slice(&(f64::from(v[row]) + 0.0).to_bits().to_le_bytes()),
        ColumnValues::Int(v) => out.extend_from_slice(&v[row].to_le_bytes()),
        ColumnValues::Bool(v) => out.push(v[row] as u8),
        ColumnValues::Text { codes, .. } => out.extend_from_slice(&codes[row].to_le_bytes()),
    }
}

/// One value's key bytes alone.
fn value_key(col: &Column, row: usize, out: &mut Vec<u8>) {
    out.clear();
    push_value(col, row, out);
}

/// A row's identity for duplicate counting: the first 128 bits of SHA-256 over its key bytes. Rows
/// are compared by this digest, not by their bytes, so the check costs 16 bytes per row (a million
/// rows of 64 features would otherwise hold 600 MB of keys); two different rows would need a
/// SHA-256 collision in 128 bits (expected only after about 2^64 rows) to be counted as one.
fn digest(key: &[u8]) -> u128 {
    let full = Sha256::digest(key);
    let mut first = [0u8; 16];
    first.copy_from_slice(&full[..16]);
    u128::from_le_bytes(first)
}

/// Column indices of the features and the target, in table order.
fn seen_columns(table: &Table, roles: &Roles) -> Vec<usize> {
    (0..table.columns.len())
        .filter(|&c| {
            let name = &table.columns[c].name;
            *name == roles.target || roles.is_feature(name)
        })
        .collect()
}

/// Every row's digest over the features and the target, in row order: computed once and shared
/// by [`duplicate_rows`] and [`split_checks`]. `table` may be a chunk of consecutive rows holding
/// only some columns: a row's digest depends only on its own values (text by code, and codes
/// mean the same level in every chunk of one read).
pub fn row_digests(table: &Table, roles: &Roles) -> Vec<u128> {
    use rayon::prelude::*;
    let columns = seen_columns(table, roles);
    (0..table.rows)
        .into_par_iter()
        .map_init(Vec::new, |key, row| {
            row_key(table, &columns, row, key);
            digest(key)
        })
        .collect()
}

/// Rows identical (features and target) to an earlier row, as `pandas.DataFrame.duplicated()`
/// counts them with its default `keep="first"`, from [`row_digests`].
pub fn duplicate_rows(row_digests: &[u128]) -> usize {
    let mut seen: FastSet<u128> = FastSet::with_capacity_and_hasher(row_digests.len(), Default::default());
    row_digests.iter().filter(|d| !seen.insert(**d)).count()
}

/// Test and validation rows identical (features and target) to some training row.
pub fn rows_duplicating_training(splits: &Splits, row_digests: &[u128]) -> (usize, usize) {
    let training: FastSet<u128> = splits.train.iter().map(|&r| row_digests[r]).collect();
    let count_in = |rows: &[usize]| rows.iter().filter(|&&r| training.contains(&row_digests[r])).count();
    (count_in(&splits.test), count_in(&splits.validation))
}

/// Whether a column holds at most one distinct value among the training rows (nulls aside).
/// Values compare as their key bytes do (nulls aside): floats with `-0.0` equal to `0.0`, by bits.
pub fn constant_on_training(col: &Column, train: &[usize]) -> bool {
    fn all_equal<T: PartialEq>(mut values: impl Iterator<Item = T>) -> bool {
        let first = values.next();
        first.is_none_or(|f| values.all(|v| v == f))
    }
    let rows = train.iter().copied().filter(|&r| col.is_valid(r));
    match &col.values {
        ColumnValues::Float(v) => all_equal(rows.map(|r| (v[r] + 0.0).to_bits())),
        ColumnValues::Float32(v) => all_equal(rows.map(|r| (f64::from(v[r]) + 0.0).to_bits())),
        ColumnValues::Int(v) => all_equal(rows.map(|r| v[r])),
        ColumnValues::Bool(v) => all_equal(rows.map(|r| v[r])),
        ColumnValues::Text { codes, .. } => all_equal(rows.map(|r| codes[r])),
    }
}

/// The columns whose crossings are checked: ids and the split group name units (a customer, a
/// bed); group columns name groups of people (a region), which are meant to appear in every split.
pub fn key_columns(roles: &Roles) -> Vec<String> {
    let mut keys: Vec<String> = roles.ids.iter().chain(roles.split_group.iter()).cloned().collect();
    keys.dedup();
    keys
}

/// How a key column crosses the split; `None` when every value occurs on one row only.
pub fn key_crossing(col: &Column, splits: &Splits) -> Option<KeyCrossing> {
    // One byte per row: 1 training, 2 validation, 4 test.
    let mut part_of = vec![0u8; col.len()];
    for (rows, bit) in [(&splits.train, 1u8), (&splits.validation, 2), (&splits.test, 4)] {
        for &r in rows {
            part_of[r] = bit;
        }
    }
    // Values by their digest (as rows above), so a unique id per row costs 16 bytes, not a string.
    let value_of = |row: usize, key: &mut Vec<u8>| {
        col.is_valid(row).then(|| {
            value_key(col, row, key);
            digest(key)
        })
    };
    let mut key = Vec::new();
    let mut parts: FastMap<u128, (u8, usize)> = FastMap::default();
    for (row, &bit) in part_of.iter().enumerate() {
        if let Some(v) = value_of(row, &mut key) {
            let entry = parts.entry(v).or_insert((0, 0));
            entry.0 |= bit;
            entry.1 += 1;
        }
    }
    if parts.values().all(|&(_, rows)| rows == 1) {
        return None;
    }
    let evaluation_rows_sharing = splits
        .validation
        .iter()
        .chain(&splits.test)
        .filter(|&&r| value_of(r, &mut key).and_then(|v| parts.get(&v)).is_some_and(|&(bits, _)| bits & 1 == 1))
        .count();
    Some(KeyCrossing {
        column: col.name.clone(),
        values: parts.len(),
        crossing: parts.values().filter(|&&(bits, _)| bits.count_ones() > 1).count(),
        evaluation_rows_sharing,
    })
}

/// The split-dependent checks on a table in memory; `row_digests` as [`row_digests`] gives them.
pub fn split_checks(table: &Table, roles: &Roles, splits: &Splits, row_digests: &[u128]) -> SplitChecks {
    let (test_rows_duplicating_training, validation_rows_duplicating_training) = rows_duplicating_training(splits, row_digests);
    let constant_on_training = roles
        .features
        .iter()
        .filter(|f| table.column(&f.name).is_some_and(|c| constant_on_training(c, &splits.train)))
        .map(|f| f.name.clone())
        .collect();
    let repeated_keys = key_columns(roles).iter().filter_map(|name| key_crossing(table.column(name)?, splits)).collect();
    SplitChecks { test_rows_duplicating_training, validation_rows_duplicating_training, constant_on_training, repeated_keys }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::data::roles::Feature;
    use crate::data::table::Column;

    fn column(name: &str, values: ColumnValues) -> Column {
        Column { name: name.into(), source_type: "test".into(), valid: None, values }
    }

    fn roles(features: &[&str], ids: &[&str]) -> Roles {
        Roles {
            target: "y".into(),
            features: features.iter().map(|f| Feature { name: f.to_string(), categorical: false }).collect(),
            feature_index: features.iter().enumerate().map(|(i, f)| (f.to_string(), i)).collect(),
            ids: ids.iter().map(|s| s.to_string()).collect(),
            groups: Vec::new(),
            dropped: Vec::new(),
            split_column: None,
            split_group: None,
        }
    }

    #[test]
    fn duplicates_follow_pandas_keep_first_and_ignore_ids() {
        let table = Table {
            rows: 5,
            columns: vec![
                column("id", ColumnValues::Int(vec![1, 2, 3, 4, 5])),
                column("x", ColumnValues::Float(vec![1.0, 1.0, -0.0, 0.0, 2.0])),
                column("y", ColumnValues::Int(vec![0, 0, 1, 1, 0])),
            ],
        };
        // Rows 1 and 3 repeat rows 0 and 2 (0.0 == -0.0, as in pandas); the id is not compared.
        let digests = row_digests(&table, &roles(&["x"], &["id"]));
        assert_eq!(duplicate_rows(&digests), 2);
        let splits = Splits { train: vec![0, 2], validation: vec![4], test: vec![1, 3] };
        let checks = split_checks(&table, &roles(&["x"], &["id"]), &splits, &digests);
        assert_eq!((checks.test_rows_duplicating_training, checks.validation_rows_duplicating_training), (2, 0));
        assert!(checks.constant_on_training.is_empty() && checks.repeated_keys.is_empty());
    }

    #[test]
    fn constant_training_columns_and_crossing_keys_are_found() {
        let table = Table {
            rows: 6,
            columns: vec![
                column("bed", ColumnValues::Int(vec![1, 1, 2, 2, 3, 3])),
                column("x", ColumnValues::Float(vec![5.0, 5.0, 5.0, 7.0, 5.0, 9.0])),
                column("y", ColumnValues::Float(vec![0.1, 0.2, 0.3, 0.4, 0.5, 0.6])),
            ],
        };
        let splits = Splits { train: vec![0, 1, 2], validation: vec![4, 5], test: vec![3] };
        let r = roles(&["x"], &["bed"]);
        let checks = split_checks(&table, &r, &splits, &row_digests(&table, &r));
        assert_eq!(checks.constant_on_training, vec!["x".to_string()]);
        assert_eq!(checks.repeated_keys, vec![KeyCrossing { column: "bed".into(), values: 3, crossing: 1, evaluation_rows_sharing: 1 }]);
    }
}
