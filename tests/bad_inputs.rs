//! The bad-input corpus: every case asserts the exact error line a user sees from `tabcard check`
//! (file, key or column, and line and column where the input has them), and exit status 2.
//! Manifest cases live in tests/bad-inputs/manifests/, each ending with `# expect: <message>`;
//! data cases are built here in a temporary folder.

mod common;

use arrow::array::{ArrayRef, BooleanArray, Date32Array, Float64Array, Int64Array, StringArray};
use common::*;
use std::sync::Arc;

fn expect_error(dir: &std::path::Path, manifest: &str, expected: &str) {
    let out = run_in(dir, &["check", manifest]);
    assert_eq!(out.status.code(), Some(2), "{manifest}: exit status; stderr: {}", stderr(&out));
    assert_eq!(stderr(&out).trim_end(), format!("error: {expected}"), "{manifest}");
}

#[test]
fn manifest_corpus_gives_the_recorded_errors() {
    let dir = repo_path("tests/bad-inputs/manifests");
    let mut files: Vec<_> = std::fs::read_dir(&dir).unwrap().map(|e| e.unwrap().path()).collect();
    files.sort();
    assert!(files.len() >= 30, "corpus has {} manifests", files.len());
    for file in files {
        let text = std::fs::read_to_string(&file).unwrap();
        let expected = text.lines().find_map(|l| l.strip_prefix("# expect: ")).unwrap_or_else(|| panic!("{file:?} has no expect line"));
        let name = file.file_name().unwrap().to_str().unwrap();
        expect_error(&dir, name, expected);
    }
}

fn float(values: &[Option<f64>]) -> ArrayRef {
    Arc::new(Float64Array::from(values.to_vec()))
}

fn good_columns() -> Vec<(&'static str, ArrayRef)> {
    let n = 40;
    vec![
        ("a", float(&(0..n).map(|i| Some(i as f64)).collect::<Vec<_>>())),
        ("b", Arc::new(StringArray::from((0..n).map(|i| ["x", "y", "z"][i % 3]).collect::<Vec<_>>())) as ArrayRef),
        ("y", Arc::new(BooleanArray::from((0..n).map(|i| i % 3 == 0).collect::<Vec<_>>())) as ArrayRef),
    ]
}

fn with(columns: Vec<(&'static str, ArrayRef)>, name: &'static str, array: ArrayRef) -> Vec<(&'static str, ArrayRef)> {
    let mut c: Vec<_> = columns.into_iter().filter(|(n, _)| *n != name).collect();
    c.push((name, array));
    c
}

fn case(columns: Vec<(&'static str, ArrayRef)>, manifest_extra: &str, expected: &str) {
    assert!(!expected.is_empty());
    let dir = tempfile::tempdir().unwrap();
    write_parquet(&dir.path().join("data.parquet"), columns);
    std::fs::write(dir.path().join("m.toml"), manifest(manifest_extra)).unwrap();
    expect_error(dir.path(), "m.toml", expected);
}

#[test]
fn calibration_needs_enough_validation_rows() {
    // 40 rows, validation 0.2: 8 validation rows, fewer than isotonic regression's 200.
    case(
        good_columns(),
        "\n[calibration]\nmethod = \"isotonic\"\n",
        "m.toml:10:1: key `calibration.method`: calibration method \"isotonic\" is fitted on the validation rows and needs at least 200; the validation split has 8 (raise split.validation, or choose a method that needs fewer rows)",
    );
    // A 95% split conformal interval needs k = ceil((n + 1) 0.95) <= n: at least 19 rows.
    let regression = with(good_columns(), "y", float(&(0..40).map(|i| Some(i as f64 * 0.5)).collect::<Vec<_>>()));
    let dir = tempfile::tempdir().unwrap();
    write_parquet(&dir.path().join("data.parquet"), regression);
    let text = manifest("\n[calibration]\ncoverage = 0.95\n").replace("task = \"binary\"", "task = \"regression\"");
    std::fs::write(dir.path().join("m.toml"), text).unwrap();
    expect_error(
        dir.path(),
        "m.toml",
        "m.toml:10:1: key `calibration.coverage`: a 0.95 conformal interval is fitted on the validation rows and needs at least 19; the validation split has 8 (raise split.validation, or choose a method that needs fewer rows)",
    );
}

#[test]
fn missing_unreadable_truncated_and_foreign_files() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("m.toml"), manifest("")).unwrap();
    let out = run_in(dir.path(), &["check", "m.toml"]);
    assert_eq!(out.status.code(), Some(2), "a missing data file is bad input");
    assert_eq!(
        stderr(&out).trim_end(),
        "error: m.toml:5:1: key `data.path`: data.parquet: no such file (data.path is resolved against the manifest's folder)"
    );

    std::fs::write(dir.path().join("data.parquet"), b"name,value\nx,1\n").unwrap();
    expect_error(dir.path(), "m.toml", "data.parquet: not a readable Parquet file: Parquet error: Invalid Parquet file. Corrupt footer");

    write_parquet(&dir.path().join("data.parquet"), good_columns());
    let bytes = std::fs::read(dir.path().join("data.parquet")).unwrap();
    std::fs::write(dir.path().join("data.parquet"), &bytes[..bytes.len() / 2]).unwrap();
    expect_error(dir.path(), "m.toml", "data.parquet: not a readable Parquet file: Parquet error: Invalid Parquet file. Corrupt footer");

    std::fs::write(dir.path().join("data.parquet"), b"").unwrap();
    let out = run_in(dir.path(), &["check", "m.toml"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).starts_with("error: data.parquet: not a readable Parquet file: "), "{}", stderr(&out));

    let out = run_in(dir.path(), &["check", "no-such.toml"]);
    assert_eq!(out.status.code(), Some(2), "a missing manifest is bad input");
    assert_eq!(stderr(&out).trim_end(), "error: no-such.toml: no such manifest file");
}

#[test]
fn zero_rows() {
    let empty: Vec<(&str, ArrayRef)> = vec![("a", float(&[])), ("y", Arc::new(BooleanArray::from(Vec::<bool>::new())) as ArrayRef)];
    case(empty, "", "data.parquet: has no rows");
}

fn bools(values: Vec<Option<bool>>) -> ArrayRef {
    Arc::new(BooleanArray::from(values))
}

#[test]
fn target_missing_all_null_partly_null_constant_or_unsupported() {
    let renamed: Vec<(&str, ArrayRef)> = good_columns().into_iter().map(|(n, a)| (if n == "y" { "y2" } else { n }, a)).collect();
    case(renamed, "", "data.parquet: column `y`: named by data.target but not in the file (did you mean `y2`?)");
    case(with(good_columns(), "y", bools(vec![None; 40])), "", "data.parquet: column `y`: is the target but every value is null");
    case(
        good_columns(),
        "\n[decision]\nfavourable = \"no\"\n",
        "data.parquet: column `y`: has no value `no` named by decision.favourable; its values are [\"false\", \"true\"]",
    );
    let mut some_null: Vec<Option<bool>> = (0..40).map(|i| Some(i % 2 == 0)).collect();
    some_null[7] = None;
    case(
        with(good_columns(), "y", bools(some_null)),
        "",
        "data.parquet: column `y`: is the target but has 1 missing values (first at row 7); drop or label those rows",
    );
    case(
        with(good_columns(), "y", bools(vec![Some(true); 40])),
        "",
        "data.parquet: column `y`: is constant (every row is `true`); there is nothing to predict",
    );
    case(
        with(good_columns(), "y", float(&(0..40).map(|i| Some(i as f64 / 3.0)).collect::<Vec<_>>())),
        "",
        "data.parquet: column `y`: has type Float64 but a class label must be a string, integer or boolean (or use task = \"regression\")",
    );
    let three = Arc::new(Int64Array::from((0..40).map(|i| i % 3).collect::<Vec<i64>>())) as ArrayRef;
    case(
        with(good_columns(), "y", three),
        "",
        "data.parquet: column `y`: has 3 distinct values but task = \"binary\" needs exactly 2 (use \"multiclass\")",
    );
    let text = Arc::new(StringArray::from(
        (0..40)
            .map(|i| {
                if i < 38 {
                    "a"
                } else if i == 38 {
                    "b"
                } else {
                    "c"
                }
            })
            .collect::<Vec<_>>(),
    )) as ArrayRef;
    let dir = tempfile::tempdir().unwrap();
    write_parquet(&dir.path().join("data.parquet"), with(good_columns(), "y", text));
    std::fs::write(dir.path().join("m.toml"), manifest("").replace("\"binary\"", "\"multiclass\"")).unwrap();
    expect_error(
        dir.path(),
        "m.toml",
        "data.parquet: column `y`: class `b` has a single row; every class needs at least 2 rows to appear in training and evaluation",
    );
}

#[test]
fn unsupported_column_type() {
    let dates = Arc::new(Date32Array::from((0..40).collect::<Vec<i32>>())) as ArrayRef;
    case(with(good_columns(), "signed_on", dates), "",
        "data.parquet: column `signed_on`: has type Date32, which tabcard cannot use; supported: floats, integers, booleans, strings, dictionary-encoded strings");
}

#[test]
fn non_finite_and_empty_features() {
    let mut values: Vec<Option<f64>> = (0..40).map(|i| Some(i as f64)).collect();
    values[12] = Some(f64::NAN);
    case(
        with(good_columns(), "a", float(&values)),
        "",
        "data.parquet: column `a`: row 12 holds NaN; tabcard needs finite numbers (store missing values as nulls)",
    );
    values[12] = Some(f64::INFINITY);
    case(
        with(good_columns(), "a", float(&values)),
        "",
        "data.parquet: column `a`: row 12 holds inf; tabcard needs finite numbers (store missing values as nulls)",
    );
    // Finite but so large that squares in the statistics overflow (issue: +-1e308 passed `check`
    // with "sd inf", then training failed without naming a column).
    values[12] = Some(-1e308);
    case(with(good_columns(), "a", float(&values)), "",
        "data.parquet: column `a`: row 12 holds -1e308, beyond ±1e100, where sums of squares in the statistics could overflow; rescale the column (other units)");
    values[12] = Some(1e100);
    values[3] = Some(2.5e100);
    case(with(good_columns(), "a", float(&values)), "",
        "data.parquet: column `a`: row 3 holds 2.5e100, beyond ±1e100, where sums of squares in the statistics could overflow; rescale the column (other units)");
    case(
        with(good_columns(), "a", float(&[None; 40])),
        "",
        "data.parquet: column `a`: has no values (every row is null); drop it or fill it",
    );
    case(
        good_columns(),
        "features = [\"a\", \"bb\"]\n",
        "data.parquet: column `bb`: named by data.features but not in the file (did you mean `b`?)",
    );
    case(
        good_columns(),
        "drop = [\"a\", \"b\"]\n",
        "data.parquet: no feature columns remain after removing the target, ids, groups and dropped columns",
    );
}
