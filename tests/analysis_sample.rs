//! From results layout 8 the heavier analyses after training (permutation importance, the
//! sensitivity table, integrated gradients, partial dependence) compute on at most 10,000 test
//! rows: a seeded sample above that (`analysis/sample.rs`). Shown on 52,000 rows of the invented
//! lease table (10,400 test rows): both files say how many rows they used, the card says it is a
//! sample, and `verify` re-derives both bit for bit. Below the cap nothing changes (the demos'
//! card snapshots and `tests/explain.rs` cover that side).

mod common;

use common::*;
use serde_json::Value;

#[test]
fn a_large_test_split_is_sampled_for_the_heavier_analyses_and_verify_reproduces_the_sample() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let body = r#"[split]
validation = 0.2
test = 0.2

[model]
hidden = [8]

[training]
epochs = 2
batch_size = 256

[selection]
baseline = false
bootstrap = 50

[analysis]
permutation_repeats = 3

[sweep]
seeds = [1]
"#;
    let manifest = lease_experiment(d, 52_000, "large.toml", "large-lease", body);
    let folder = trained(d, &manifest);
    let read = |f: &str| -> Value { serde_json::from_slice(&std::fs::read(folder.join(f)).unwrap()).unwrap() };
    let selection = read("selection.json");
    let test_rows = selection["test"]["rows"].as_u64().unwrap();
    assert_eq!(test_rows, 10_400);
    assert_eq!(read("importance.json")["sampled_rows"], 10_000);
    assert_eq!(read("sensitivity.json")["sampled_rows"], 10_000);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("shuffled across a seeded sample of 10000 of the 10400 test rows"), "importance says it is a sample");
    assert!(card.contains("Over a seeded sample of 10000 of the 10400 test rows the worst completeness gap"), "attributions say it too");
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--jobs", "2"]);
    assert!(out.status.success(), "verify re-derives the sampled analyses: {}\n{}", stdout(&out), stderr(&out));
}
