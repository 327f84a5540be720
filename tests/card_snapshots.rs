//! The model cards of the two demo experiments and of one open table (scikit-learn's breast cancer
//! diagnosis, tests/data/open/breast-cancer.toml), reviewed and committed under tests/snapshots/:
//! a change to any card wording, figure or rule shows up here as a diff to review. Lines that
//! depend on the machine, the time or the checkout (training time and workers, results digest,
//! repository commit, the numerics environment rows) are masked on both sides.
//!
//! After a deliberate change: `TABCARD_WRITE_SNAPSHOTS=1 cargo test --release --test
//! card_snapshots`, read the diff, and commit it with the reason.

mod common;

use common::*;

const MASKED: &[&str] = &[
    "**Trained at:**",
    "| results digest |",
    "| manifest repository commit |",
    "| tabcard |",
    "| numerics |",
    "| numerical kernels |",
    "| target |",
    "| CPU features |",
    "| C library |",
];

fn masked(card: &str) -> String {
    card.lines()
        .map(|l| match MASKED.iter().find(|m| l.starts_with(**m)) {
            Some(m) => format!("{m} (masked)"),
            None => l.to_string(),
        })
        .collect::<Vec<_>>()
        .join("\n")
}

fn check(experiment: &str) {
    check_manifest(experiment, &format!("experiments/{experiment}.toml"));
}

fn check_manifest(experiment: &str, manifest: &str) {
    let dir = tempfile::tempdir().unwrap();
    let results = dir.path().join("results");
    let out = run_in(&repo_path(""), &["train", manifest, "--results", results.to_str().unwrap(), "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let card = std::fs::read_to_string(experiment_folder(&results).unwrap().join("card.md")).unwrap();
    let snapshot = repo_path(&format!("tests/snapshots/{experiment}.card.md"));
    if std::env::var_os("TABCARD_WRITE_SNAPSHOTS").is_some() {
        std::fs::write(&snapshot, masked(&card) + "\n").unwrap();
        return;
    }
    let want = std::fs::read_to_string(&snapshot).expect("the snapshot is committed");
    let got = masked(&card) + "\n";
    if want != got {
        let first = want.lines().zip(got.lines()).position(|(a, b)| a != b).unwrap_or(want.lines().count().min(got.lines().count()));
        panic!(
            "{experiment}: the card differs from {} at line {}:\n  committed: {}\n  now:       {}\n(regenerate deliberately: see the top of this file)",
            snapshot.display(),
            first + 1,
            want.lines().nth(first).unwrap_or("(end)"),
            got.lines().nth(first).unwrap_or("(end)")
        );
    }
}

#[test]
fn the_lease_demo_card_matches_its_reviewed_snapshot() {
    check("lease-default");
}

#[test]
fn the_greenhouse_demo_card_matches_its_reviewed_snapshot() {
    check("greenhouse-yield");
}

#[test]
fn the_open_breast_cancer_card_matches_its_reviewed_snapshot() {
    check_manifest("breast-cancer", "tests/data/open/breast-cancer.toml");
}
