//! Fingerprints: the canonical manifest hash ignores comments, whitespace, key order and spelling
//! of equal values, and changes with any change of meaning; the logical data hash survives a
//! rewrite with another compression and row-group size while the file hash does not. The
//! experiment fingerprint printed by `tabcard check` follows the same rules.

mod common;

use common::*;
use std::path::Path;
use tabcard::data::parquet::{encode, read_table, WriteOptions};
use tabcard::manifest::{canonical_hash, parse};

const BASE: &str = r#"
[experiment]
name = "lease"
owner = "team"

[data]
path = "x.parquet"
target = "y"
task = "binary"

[model]
hidden = [32, 32]
dropout = 0.1

[training]
learning_rate = 0.001
epochs = 20

[sweep]
seeds = [1, 2]

[sweep.grid]
"model.dropout" = [0.0, 0.2]
"#;

// Same meaning: comments, blank lines, reordered sections and keys, a default written out,
// 1e-3 for 0.001, an integer 0 for the float 0.0 in the grid.
const REWRITTEN: &str = r#"
# A comment that must not matter.
[training]
epochs = 20            # trailing comment
learning_rate = 1e-3

[sweep.grid]
"model.dropout" = [0, 0.2]

[model]
dropout = 0.1
hidden = [ 32,
           32 ]
activation = "relu"    # the default, spelled out

[data]
task = "binary"
target = "y"
path = "x.parquet"

[sweep]
seeds = [1, 2]

[experiment]
owner = "team"
name = "lease"
"#;

fn hash(text: &str) -> String {
    canonical_hash(&parse(Path::new("m.toml"), text).unwrap())
}

#[test]
fn comments_whitespace_and_key_order_do_not_change_the_manifest_hash() {
    assert_eq!(hash(BASE), hash(REWRITTEN));
}

#[test]
fn every_change_of_meaning_changes_the_manifest_hash() {
    let base = hash(BASE);
    let edits = [
        ("dropout = 0.1", "dropout = 0.15"),
        ("hidden = [32, 32]", "hidden = [32, 16]"),
        ("learning_rate = 0.001", "learning_rate = 0.002"),
        ("epochs = 20", "epochs = 21"),
        ("seeds = [1, 2]", "seeds = [2, 1]"),
        ("[0.0, 0.2]", "[0.0, 0.3]"),
        ("target = \"y\"", "target = \"z\""),
        ("owner = \"team\"", "owner = \"other team\""),
        ("path = \"x.parquet\"", "path = \"y.parquet\""),
    ];
    for (from, to) in edits {
        assert!(BASE.contains(from), "{from}");
        assert_ne!(hash(&BASE.replace(from, to)), base, "{from} -> {to}");
    }
    let with_default_changed = BASE.replace("[model]", "[model]\nbatch_norm = true");
    assert_ne!(hash(&with_default_changed), base);
}

#[test]
fn logical_hash_survives_reencoding_but_file_hash_does_not() {
    let dir = tempfile::tempdir().unwrap();
    let columns = tabcard::demo::lease_defaults(3000, 3);
    let a = dir.path().join("a.parquet");
    let b = dir.path().join("b.parquet");
    std::fs::write(&a, encode(columns.clone(), WriteOptions { snappy: true, row_group_rows: 1 << 20 }).unwrap()).unwrap();
    std::fs::write(&b, encode(columns, WriteOptions { snappy: false, row_group_rows: 250 }).unwrap()).unwrap();
    let (ta, tb) = (read_table(&a).unwrap(), read_table(&b).unwrap());
    assert_eq!(ta.content_hash(), tb.content_hash());
    assert_ne!(tabcard::fingerprint::file_sha256(&a).unwrap(), tabcard::fingerprint::file_sha256(&b).unwrap());
    // One changed value changes the logical hash.
    let mut changed = tabcard::demo::lease_defaults(3000, 3);
    changed[1].1 = std::sync::Arc::new(arrow::array::Float64Array::from(vec![1.0; 3000]));
    std::fs::write(&b, encode(changed, WriteOptions::default()).unwrap()).unwrap();
    assert_ne!(read_table(&b).unwrap().content_hash(), ta.content_hash());
}

fn fingerprint_line(dir: &Path, manifest: &str) -> String {
    let out = run_in(dir, &["check", manifest]);
    assert!(out.status.success(), "{}", stderr(&out));
    stdout(&out).lines().find(|l| l.starts_with("fingerprint")).unwrap().to_string()
}

#[test]
fn check_prints_the_same_experiment_fingerprint_for_a_reformatted_manifest() {
    let demo = repo_path("experiments/lease-default.toml");
    let text = std::fs::read_to_string(&demo).unwrap();
    let dir = repo_path("experiments");
    // Reverse the order of the sections and strip every comment: same meaning.
    let mut sections: Vec<String> = Vec::new();
    for line in text.lines() {
        let line = line.split(" #").next().unwrap();
        if line.starts_with('#') {
            continue;
        }
        if line.starts_with('[') || sections.is_empty() {
            sections.push(String::new());
        }
        let last = sections.last_mut().unwrap();
        last.push_str(line);
        last.push('\n');
    }
    sections.reverse();
    let tmp = tempfile::Builder::new().prefix(".reordered-").suffix(".toml").tempfile_in(&dir).unwrap();
    std::fs::write(tmp.path(), sections.concat()).unwrap();
    let name = tmp.path().file_name().unwrap().to_str().unwrap();
    assert_eq!(fingerprint_line(&dir, "lease-default.toml"), fingerprint_line(&dir, name));
    std::fs::write(tmp.path(), text.replace("patience = 6", "patience = 7")).unwrap();
    assert_ne!(fingerprint_line(&dir, "lease-default.toml"), fingerprint_line(&dir, name));
}
