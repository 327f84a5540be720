//! Replays every input under tests/fuzz/corpus and tests/fuzz/regressions through the two fuzzed
//! entry points (manifest parser, Parquet loader): each must return a value or an error, never
//! panic. Crash reproducers found by cargo-fuzz are committed to tests/fuzz/regressions/.

use std::path::Path;

fn inputs(target: &str) -> Vec<std::path::PathBuf> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/fuzz");
    let mut out = Vec::new();
    for dir in ["corpus", "regressions"] {
        if let Ok(entries) = std::fs::read_dir(root.join(dir).join(target)) {
            out.extend(entries.map(|e| e.unwrap().path()).filter(|p| p.is_file()));
        }
    }
    out.sort();
    out
}

#[test]
fn manifest_inputs_never_panic() {
    let files = inputs("manifest_parse");
    assert!(files.len() >= 30, "{} manifest seeds", files.len());
    for f in files {
        let bytes = std::fs::read(&f).unwrap();
        if let Ok(text) = std::str::from_utf8(&bytes) {
            if let Ok(m) = tabcard::manifest::parse(Path::new("fuzz.toml"), text) {
                let _ = tabcard::experiment::plan::build(&m, &tabcard::experiment::plan::RunNaming::Inputs("fuzz".into()));
            }
        }
    }
}

#[test]
fn parquet_inputs_never_panic() {
    let files = inputs("parquet_load");
    assert!(!files.is_empty());
    for f in files {
        let bytes = std::fs::read(&f).unwrap();
        if let Ok(t) = tabcard::data::parquet::read_table_from_bytes(bytes, Path::new("fuzz.parquet")) {
            let _ = t.content_hash();
        }
    }
}
