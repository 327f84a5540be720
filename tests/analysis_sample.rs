//! From results layout 8 the heavier analyses after training (permutation importance, the
//! sensitivity table, integrated gradients, partial dependence) compute on at most 10,000 test
//! rows: a seeded sample above that (`analysis/sample.rs`). Shown on 52,000 rows of the invented
//! lease table (10,400 test rows): both files say how many rows they used, the card says it is a
//! sample, and `verify` re-derives both bit for bit. Below the cap nothing changes (the demos'
//! card snapshots and `tests/explain.rs` cover that side). From layout 9 the threshold reference
//! row is chosen among at most 100,000 training rows, the same way.

mod common;

use common::*;
use serde_json::Value;

/// The manifest body of one small network on a 60/20/20 split: `(epochs, batch_size)`, bootstrap
/// resamples and permutation repeats.
fn small_model((epochs, batch): (usize, usize), bootstrap: usize, repeats: usize) -> String {
    format!(
        "[split]\nvalidation = 0.2\ntest = 0.2\n\n[model]\nhidden = [8]\n\n[training]\nepochs = {epochs}\nbatch_size = {batch}\n\n\
         [selection]\nbaseline = false\nbootstrap = {bootstrap}\n\n[analysis]\npermutation_repeats = {repeats}\n\n[sweep]\nseeds = [1]\n"
    )
}

#[test]
fn a_large_test_split_is_sampled_for_the_heavier_analyses_and_verify_reproduces_the_sample() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = lease_experiment(d, 52_000, "large.toml", "large-lease", &small_model((2, 256), 50, 3));
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
    assert_eq!(read("sensitivity.json")["references"].get("threshold_sampled_rows"), None, "31,200 training rows: every one");
}

/// From results layout 9 the threshold reference row is chosen among at most 100,000 training
/// rows. 170,000 lease rows leave 102,000 for training: the file records the sample, the card
/// says so, and `verify` re-derives it.
#[test]
fn a_large_training_split_is_sampled_for_the_threshold_reference_and_verify_reproduces_it() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = lease_experiment(d, 170_000, "larger.toml", "larger-lease", &small_model((1, 512), 20, 2));
    let folder = trained(d, &manifest);
    let sensitivity: Value = serde_json::from_slice(&std::fs::read(folder.join("sensitivity.json")).unwrap()).unwrap();
    let references = &sensitivity["references"];
    assert_eq!(references["threshold_sampled_rows"], 100_000, "{references}");
    assert_eq!(references["threshold"]["status"], "available", "{}", references["threshold"]);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("among a seeded sample of 100000 of the training rows"), "the card says the reference comes from a sample");
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--jobs", "2"]);
    assert!(out.status.success(), "verify re-derives the sample: {}\n{}", stdout(&out), stderr(&out));
}
