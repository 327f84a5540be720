//! Helpers shared by the integration tests: Parquet files from Arrow arrays, manifests in a
//! temporary folder, and running the real `tabcard` binary.
#![allow(dead_code)]

use arrow::array::ArrayRef;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use tabcard::data::parquet::{encode, WriteOptions};

pub fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_tabcard"))
}

pub fn run_in(dir: &Path, args: &[&str]) -> Output {
    bin().current_dir(dir).args(args).output().expect("run tabcard")
}

/// Runs `tabcard ARGS` in `dir` with a deadline: (exit status, or `None` when it was killed at
/// the deadline; what it wrote to stderr). Stdout is discarded; stderr is read while the command
/// runs, so a chatty command cannot block on a full pipe.
pub fn run_within(dir: &Path, args: &[&str], deadline: std::time::Duration) -> (Option<i32>, String) {
    let mut child = bin().current_dir(dir).args(args).stdout(Stdio::null()).stderr(Stdio::piped()).spawn().expect("run tabcard");
    let mut pipe = child.stderr.take().expect("stderr is piped");
    let reader = std::thread::spawn(move || {
        let mut text = String::new();
        let _ = std::io::Read::read_to_string(&mut pipe, &mut text);
        text
    });
    let started = std::time::Instant::now();
    let status = loop {
        if let Some(status) = child.try_wait().expect("wait for tabcard") {
            break status.code();
        }
        if started.elapsed() > deadline {
            let _ = child.kill();
            let _ = child.wait();
            break None;
        }
        std::thread::sleep(std::time::Duration::from_millis(5));
    };
    (status, reader.join().expect("stderr reader"))
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

pub fn stdout(o: &Output) -> String {
    String::from_utf8_lossy(&o.stdout).into_owned()
}

pub fn write_parquet(path: &Path, columns: Vec<(&str, ArrayRef)>) {
    let bytes = encode(columns.into_iter().map(|(n, a)| (n.to_string(), a)).collect(), WriteOptions::default()).unwrap();
    std::fs::write(path, bytes).unwrap();
}

/// Every value of the column `name` of a Parquet file, read as the Arrow array type `A` and
/// taken out of it by `value` (row by row, in file order).
pub fn parquet_column<A: arrow::array::Array + 'static, T>(path: &Path, name: &str, value: impl Fn(&A, usize) -> T) -> Vec<T> {
    let file = std::fs::File::open(path).unwrap();
    let reader = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(file).unwrap().build().unwrap();
    let mut out = Vec::new();
    for batch in reader {
        let batch = batch.unwrap();
        let col = batch.column_by_name(name).unwrap_or_else(|| panic!("no column {name}"));
        let values = col.as_any().downcast_ref::<A>().unwrap_or_else(|| panic!("{name} is not of the expected type"));
        out.extend((0..values.len()).map(|i| value(values, i)));
    }
    out
}

pub fn repo_path(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// A small binary manifest for `data.parquet` in the same folder, with extra TOML appended.
pub fn manifest(extra: &str) -> String {
    format!("[experiment]\nname = \"test\"\n\n[data]\npath = \"data.parquet\"\ntarget = \"y\"\ntask = \"binary\"\n{extra}")
}

/// `dir/leases.parquet` with the invented lease data (first `rows` rows) and `dir/{file}`, a
/// manifest for it named `name` whose sections after `[data]` are `body`.
pub fn lease_experiment(dir: &Path, rows: usize, file: &str, name: &str, body: &str) -> PathBuf {
    let columns = tabcard::demo::lease_defaults(rows, 7);
    let bytes = encode(columns, WriteOptions::default()).unwrap();
    std::fs::write(dir.join("leases.parquet"), bytes).unwrap();
    let text = format!(
        r#"[experiment]
name = "{name}"

[data]
path = "leases.parquet"
target = "defaulted_12m"
task = "binary"
ids = ["application_id"]

{body}"#
    );
    let path = dir.join(file);
    std::fs::write(&path, text).unwrap();
    path
}

/// A folder with the invented lease data (first `rows` rows) and a small experiment manifest
/// whose grid and epochs are sized for tests.
pub fn small_lease_experiment(dir: &Path, rows: usize, grid: &str) -> PathBuf {
    let body = format!(
        r#"[model]
hidden = [16]

[training]
epochs = 6
batch_size = 64

[selection]
bootstrap = 200

[sweep]
seeds = [1, 2]
{grid}
"#
    );
    lease_experiment(dir, rows, "small.toml", "small-lease", &body)
}

/// The one experiment folder under a results root, if it exists yet.
pub fn experiment_folder(results: &Path) -> Option<PathBuf> {
    std::fs::read_dir(results).ok()?.map(|e| e.unwrap().path()).find(|p| p.is_dir())
}

/// Trains `manifest` into `dir/results` with two workers and returns its experiment folder.
pub fn trained(dir: &Path, manifest: &Path) -> PathBuf {
    let out = run_in(dir, &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    experiment_folder(&dir.join("results")).expect("an experiment folder")
}

/// Copies the folder `from` (recursively) to `to`.
pub fn copy_dir(from: &Path, to: &Path) {
    std::fs::create_dir_all(to).unwrap();
    for e in std::fs::read_dir(from).unwrap() {
        let p = e.unwrap().path();
        let target = to.join(p.file_name().unwrap());
        if p.is_dir() {
            copy_dir(&p, &target)
        } else {
            std::fs::copy(&p, &target).unwrap();
        }
    }
}

/// The cells of one CSV line (RFC 4180 quoting: a quoted cell may hold commas and "" for ").
pub fn csv_cells(line: &str) -> Vec<String> {
    let (mut cells, mut cell, mut quoted, mut chars) = (Vec::new(), String::new(), false, line.chars().peekable());
    while let Some(c) = chars.next() {
        match (c, quoted) {
            ('"', true) if chars.peek() == Some(&'"') => {
                cell.push('"');
                chars.next();
            }
            ('"', _) => quoted = !quoted,
            (',', false) => cells.push(std::mem::take(&mut cell)),
            _ => cell.push(c),
        }
    }
    cells.push(cell);
    cells
}

/// Every row of a CSV file tabcard wrote (no line breaks inside cells) as (column name -> cell).
pub fn csv_rows(path: &Path) -> Vec<std::collections::BTreeMap<String, String>> {
    let text = std::fs::read_to_string(path).unwrap();
    let mut lines = text.lines();
    let header = csv_cells(lines.next().unwrap_or(""));
    lines.map(|l| header.iter().cloned().zip(csv_cells(l)).collect()).collect()
}
