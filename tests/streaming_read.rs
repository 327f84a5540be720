//! Groundwork for a data path that never holds the whole decoded table: reading a Parquet file one
//! column at a time (across every row group) gives exactly the columns of the whole-table read, and
//! the content hash built column by column is the whole table's, bit for bit, on a generated
//! multi-row-group file with every supported kind and nulls, and on the invented demo table.

mod common;

use arrow::array::{ArrayRef, BooleanArray, Float32Array, Float64Array, Int64Array, StringArray};
use common::*;
use std::path::Path;
use std::sync::Arc;
use tabcard::data::parquet::{column_names, encode, read_columns, read_table, WriteOptions};
use tabcard::data::table::ContentHasher;

fn streamed_equals_whole(path: &Path) {
    let whole = read_table(path).unwrap();
    let names = column_names(path).unwrap();
    assert_eq!(names, whole.columns.iter().map(|c| c.name.clone()).collect::<Vec<_>>());
    let mut hasher = ContentHasher::new(whole.rows, names.len());
    for (i, name) in names.iter().enumerate() {
        let one = read_columns(path, &[name]).unwrap();
        assert_eq!(one.rows, whole.rows);
        assert_eq!(one.columns.len(), 1);
        assert_eq!(one.columns[0], whole.columns[i], "column {name}");
        hasher.add(&one.columns[0]);
    }
    assert_eq!(hasher.finish(), whole.content_hash(), "{}", path.display());
}

#[test]
fn column_at_a_time_reads_equal_the_whole_table_across_row_groups() {
    let dir = tempfile::tempdir().unwrap();
    let rows = 10_000;
    let columns: Vec<(String, ArrayRef)> = vec![
        ("f32".into(), Arc::new(Float32Array::from((0..rows).map(|r| (r as f32).sin()).collect::<Vec<_>>())) as ArrayRef),
        ("f64_nulls".into(), Arc::new(Float64Array::from((0..rows).map(|r| (r % 7 != 0).then_some(r as f64 * 0.5)).collect::<Vec<_>>()))),
        ("int".into(), Arc::new(Int64Array::from((0..rows).map(|r| (r % 13) as i64 - 6).collect::<Vec<_>>()))),
        ("flag".into(), Arc::new(BooleanArray::from((0..rows).map(|r| r % 3 == 0).collect::<Vec<_>>()))),
        (
            "text_nulls".into(),
            Arc::new(StringArray::from((0..rows).map(|r| (r % 11 != 0).then(|| format!("level-{}", r % 5))).collect::<Vec<_>>())),
        ),
    ];
    let bytes = encode(columns, WriteOptions { snappy: true, row_group_rows: 1_000 }).unwrap();
    let path = dir.path().join("groups.parquet");
    std::fs::write(&path, bytes).unwrap();
    streamed_equals_whole(&path);
    // Several columns at once come in file order, whatever order they are asked in.
    let two = read_columns(&path, &["text_nulls", "f32"]).unwrap();
    assert_eq!(two.columns.iter().map(|c| c.name.as_str()).collect::<Vec<_>>(), ["f32", "text_nulls"]);
    // A name that is not in the file is named.
    let err = read_columns(&path, &["nope"]).unwrap_err().to_string();
    assert!(err.contains("column `nope`: is not in the file"), "{err}");
}

#[test]
fn the_demo_table_streams_to_the_same_content_hash() {
    streamed_equals_whole(&repo_path("data-demo/lease-applications.parquet"));
}
