//! The data path that never holds the whole decoded table. Reading a Parquet file one column at a
//! time (across every row group) gives exactly the columns of the whole-table read, and the
//! content hash built column by column is the whole table's. The streamed experiment (first pass a
//! column and a chunk of rows at a time, matrices built a column at a time) equals, bit for bit,
//! everything computed on the whole table in memory: roles, target, split, summary, split checks,
//! preprocessing and matrices, on a generated file of many row groups whose boundaries do not
//! meet the chunk boundaries.

mod common;

use arrow::array::{ArrayRef, BooleanArray, Float32Array, Float64Array, Int64Array, StringArray};
use common::*;
use std::path::Path;
use std::sync::Arc;
use tabcard::data::parquet::{column_names, encode, read_columns, read_table, WriteOptions, CHUNK_ROWS};
use tabcard::data::table::{ColumnValues, ContentHasher};

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

/// A table of every supported kind with nulls, an id that repeats, a group, a text feature and a
/// binary text target, `rows` long; from row 40,000 on, every row but its id repeats an earlier one.
fn mixed_columns(rows: usize) -> Vec<(String, ArrayRef)> {
    let wave = |r: usize, k: f64| ((r as f64) * k).sin();
    vec![
        ("customer".into(), Arc::new(Int64Array::from((0..rows).map(|r| (r / 3) as i64).collect::<Vec<_>>())) as ArrayRef),
        (
            "x32".into(),
            Arc::new(Float32Array::from((0..rows).map(|r| r % 40_000).map(|r| wave(r, 0.37) as f32 * 40.0).collect::<Vec<_>>())),
        ),
        (
            "x64_nulls".into(),
            Arc::new(Float64Array::from(
                (0..rows).map(|r| r % 40_000).map(|r| (r % 17 != 0).then(|| wave(r, 1.3) * 1e3 + (r % 5) as f64)).collect::<Vec<_>>(),
            )),
        ),
        ("small_int".into(), Arc::new(Int64Array::from((0..rows).map(|r| r % 40_000).map(|r| (r % 13) as i64 - 6).collect::<Vec<_>>()))),
        ("flag".into(), Arc::new(BooleanArray::from((0..rows).map(|r| r % 40_000).map(|r| r % 3 == 0).collect::<Vec<_>>()))),
        (
            "region".into(),
            Arc::new(StringArray::from(
                (0..rows).map(|r| r % 40_000).map(|r| ["north", "south", "east", "west"][(r * 7 / 5) % 4]).collect::<Vec<_>>(),
            )),
        ),
        (
            "plan".into(),
            Arc::new(StringArray::from(
                (0..rows).map(|r| r % 40_000).map(|r| (r % 11 != 0).then(|| format!("plan-{}", (r * r) % 9))).collect::<Vec<_>>(),
            )),
        ),
        (
            "outcome".into(),
            Arc::new(StringArray::from(
                (0..rows)
                    .map(|r| r % 40_000)
                    .map(|r| if wave(r, 0.11) + wave(r, 0.9) > 0.6 { "late" } else { "on time" })
                    .collect::<Vec<_>>(),
            )),
        ),
    ]
}

#[test]
fn the_streamed_experiment_equals_the_in_memory_one_bit_for_bit() {
    use tabcard::data::{leakage, prep::Preprocessor, roles, split, summary};
    let dir = tempfile::tempdir().unwrap();
    let rows = 2 * CHUNK_ROWS + 12_345;
    for (file, group_rows) in [("many.parquet", 9_973), ("one.parquet", rows)] {
        let bytes = encode(mixed_columns(rows), WriteOptions { snappy: true, row_group_rows: group_rows }).unwrap();
        std::fs::write(dir.path().join(file), bytes).unwrap();
    }
    let manifest = |file: &str| {
        let path = dir.path().join(format!("{file}.toml"));
        std::fs::write(
            &path,
            format!(
                "[experiment]\nname = \"streamed\"\n[data]\npath = \"{file}\"\ntarget = \"outcome\"\ntask = \"binary\"\n\
                 ids = [\"customer\"]\ngroup_columns = [\"region\"]\ncategorical = [\"small_int\"]\n[split]\nseed = 9\n"
            ),
        )
        .unwrap();
        path
    };
    let streamed = tabcard::experiment::open(&manifest("many.parquet")).unwrap();

    // The same experiment computed on the whole table in memory.
    let path = dir.path().join("many.parquet");
    let table = read_table(&path).unwrap();
    let m = &streamed.manifest;
    let (roles, target) = roles::resolve(m, &table, &path).unwrap();
    let splits = split::split(&table, &target, &m.split, &path).unwrap();
    let digests = leakage::row_digests(&table, &roles);
    let mut whole_summary = summary::summarise(&table, &roles, &target, &digests);
    whole_summary.split_checks = Some(leakage::split_checks(&table, &roles, &splits, &digests));
    let preprocessor = Preprocessor::fit(&table, &roles.features, &splits.train, &path).unwrap();

    assert_eq!(streamed.data.content_sha256, table.content_hash());
    assert_eq!((streamed.rows, streamed.columns), (rows, 8));
    assert_eq!(streamed.roles, roles);
    assert_eq!(streamed.target, target);
    assert_eq!(streamed.splits, splits);
    assert_eq!(streamed.summary, whole_summary);
    assert_eq!(streamed.preprocessor, preprocessor);
    // The checks saw something to count: the repeated id crosses the split, `plan` has nulls.
    let checks = whole_summary.split_checks.as_ref().unwrap();
    assert_eq!(checks.repeated_keys.len(), 1, "{checks:?}");
    assert!(whole_summary.duplicate_rows.unwrap() > 0);
    assert!(preprocessor.output_names.iter().any(|n| n == "plan:missing"), "{:?}", preprocessor.output_names);

    let prepared = tabcard::experiment::prepared::Prepared::new(streamed).unwrap();
    let bits = |m: &tabcard::data::prep::Matrix| m.data.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
    for (rows_of, built) in [(&splits.train, &prepared.train_x), (&splits.validation, &prepared.validation_x)] {
        let (whole, _) = preprocessor.transform(&table, rows_of, &path).unwrap();
        assert_eq!((built.rows, built.cols), (whole.rows, whole.cols));
        assert!(bits(built) == bits(&whole), "matrices differ");
    }
    let test = preprocessor.transform_source(&prepared.exp.source, &[&splits.test]).unwrap();
    let whole_test = preprocessor.transform(&table, &splits.test, &path).unwrap();
    assert!(bits(&test[0].0) == bits(&whole_test.0));
    // The same counts and flags; per-row flag lists are scoring's alone (`transform`).
    let mut whole_report = whole_test.1.clone();
    whole_report.row_flags.clear();
    assert!(test[0].1 == whole_report, "transform reports differ");

    // One row group or many: the same experiment (the file hash aside).
    let single = tabcard::experiment::open(&manifest("one.parquet")).unwrap();
    let exp = &prepared.exp;
    assert_ne!(single.data.file_sha256, exp.data.file_sha256);
    assert_eq!(single.data.content_sha256, exp.data.content_sha256);
    assert_eq!((&single.summary, &single.splits, &single.preprocessor), (&exp.summary, &exp.splits, &exp.preprocessor));
}

#[test]
fn chunked_reads_keep_text_codes_and_row_numbers_across_chunks() {
    let dir = tempfile::tempdir().unwrap();
    let rows = CHUNK_ROWS + 777;
    let path = dir.path().join("chunks.parquet");
    std::fs::write(&path, encode(mixed_columns(rows), WriteOptions { snappy: false, row_group_rows: 5_000 }).unwrap()).unwrap();
    let whole = read_table(&path).unwrap();
    let source = tabcard::data::parquet::ParquetSource::open(&path).unwrap();
    let mut seen = 0;
    source
        .for_each_chunk(&["plan", "x64_nulls"], |first, chunk| {
            assert_eq!(first, seen);
            for (c, name) in chunk.columns.iter().zip(["x64_nulls", "plan"]) {
                let full = whole.column(name).unwrap();
                assert_eq!(c.name, name);
                for r in 0..chunk.rows {
                    assert_eq!(c.label(r), full.label(first + r), "{name} row {}", first + r);
                }
                if let (ColumnValues::Text { codes, .. }, ColumnValues::Text { codes: all, .. }) = (&c.values, &full.values) {
                    assert_eq!(codes[..], all[first..first + chunk.rows]);
                }
            }
            seen += chunk.rows;
            Ok(())
        })
        .unwrap();
    assert_eq!(seen, rows);
}

#[test]
fn a_file_changed_between_passes_is_an_error_not_a_mix() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("moving.parquet");
    std::fs::write(&path, encode(mixed_columns(1_000), WriteOptions::default()).unwrap()).unwrap();
    let source = tabcard::data::parquet::ParquetSource::open(&path).unwrap();
    assert!(source.read(&["x32"]).is_ok());
    // Rewritten in place with other content (another length).
    std::fs::OpenOptions::new().append(true).open(&path).and_then(|mut f| std::io::Write::write_all(&mut f, b"tail")).unwrap();
    let err = source.read(&["x32"]).unwrap_err().to_string();
    assert!(err.contains("changed while tabcard was reading it"), "{err}");
}
