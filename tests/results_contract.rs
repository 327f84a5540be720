//! The results contract of layout 4: evidence independent of place and machine (the same
//! experiment in a git checkout, in a plain copy and with one or two workers has one results
//! digest), attached record folders that leave the evidence alone and are checked by their own
//! lists, ledger lines in exactly the shape tabcard 0.5 reads, and folders of layouts 2 and 3
//! still read.

mod common;

use common::*;
use std::path::{Path, PathBuf};

/// A project `root` holding `experiments/small.toml` and `data/leases.parquet`: the manifest's
/// folder is not the project's root, so a git checkout and a plain copy place it differently.
fn project(root: &Path) -> PathBuf {
    std::fs::create_dir_all(root.join("experiments")).unwrap();
    std::fs::create_dir_all(root.join("data")).unwrap();
    let manifest = small_lease_experiment(&root.join("data"), 400, "");
    let text = std::fs::read_to_string(&manifest).unwrap().replace("path = \"leases.parquet\"", "path = \"../data/leases.parquet\"");
    std::fs::remove_file(&manifest).unwrap();
    let moved = root.join("experiments/small.toml");
    std::fs::write(&moved, text).unwrap();
    moved
}

fn git(dir: &Path, args: &[&str]) -> bool {
    std::process::Command::new("git").arg("-C").arg(dir).args(args).output().is_ok_and(|o| o.status.success())
}

/// Trains in `dir` with `jobs` workers; returns the experiment folder.
fn train_with(dir: &Path, jobs: &str) -> PathBuf {
    let out = run_in(dir, &["train", "experiments/small.toml", "--results", "results", "--jobs", jobs]);
    assert!(out.status.success(), "{}", stderr(&out));
    experiment_folder(&dir.join("results")).unwrap()
}

fn digest(folder: &Path) -> String {
    tabcard::fingerprint::file_sha256(&folder.join("integrity.sha256")).unwrap()
}

#[test]
fn the_same_experiment_has_one_digest_in_a_checkout_a_plain_copy_and_at_any_worker_count() {
    let dir = tempfile::tempdir().unwrap();
    let checkout = dir.path().join("checkout");
    project(&checkout);
    let in_git = git(&checkout, &["init", "-q"])
        && git(&checkout, &["-c", "user.name=t", "-c", "user.email=t@example.org", "add", "."])
        && git(&checkout, &["-c", "user.name=t", "-c", "user.email=t@example.org", "commit", "-q", "-m", "x"]);
    let copy = dir.path().join("copy");
    project(&copy);
    let (a, b) = (train_with(&checkout, "2"), train_with(&copy, "1"));
    assert_eq!(a.file_name(), b.file_name(), "one experiment fingerprint");
    assert_eq!(digest(&a), digest(&b), "one results digest in a git checkout and a plain copy, with 2 and 1 workers");
    assert_eq!(std::fs::read(a.join("integrity.sha256")).unwrap(), std::fs::read(b.join("integrity.sha256")).unwrap());
    // What differs between the two places is recorded, outside the evidence.
    let location =
        |f: &Path| -> serde_json::Value { serde_json::from_str(&std::fs::read_to_string(f.join("location.json")).unwrap()).unwrap() };
    if in_git {
        assert_eq!(location(&a)["manifest_path"], "experiments/small.toml");
        assert_eq!(location(&a)["data_outside_project"], false);
    }
    assert_eq!(location(&b)["manifest_path"], "small.toml", "outside git the project is the manifest's folder");
    assert_eq!(location(&b)["data_outside_project"], true);
    // Both verify, and the ledger of each records the digest.
    // Outside git the manifest's folder is the project, so the copy is verified through its
    // manifest (its results folder lies outside that project).
    for (root, target) in [(&checkout, a.to_str().unwrap()), (&copy, "experiments/small.toml")] {
        let out = run_in(root, &["verify", target, "--results", "results"]);
        assert!(out.status.success(), "{}{}", stdout(&out), stderr(&out));
        assert!(stdout(&out).contains("and test-predictions.csv"), "{}", stdout(&out));
        let ledger = std::fs::read_to_string(root.join("results/ledger.jsonl")).unwrap();
        assert!(ledger.contains(&digest(&a)));
    }
}

#[test]
fn attached_records_leave_card_predict_and_verify_working_and_are_checked_by_their_own_lists() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 400, "");
    let folder = trained(d, &manifest);
    let before = digest(&folder);
    let evidence_list = std::fs::read(folder.join("integrity.sha256")).unwrap();
    let review = tabcard::store::attached::attach(
        &folder,
        "comparisons",
        "2026-12-03-model-risk",
        &[("review.json", b"{\"decision\": \"approved\"}\n")],
    )
    .unwrap();
    let monitoring = tabcard::store::attached::attach(
        &folder,
        "monitoring",
        "2027-01",
        &[("report.json", b"{\"rows\": 10}\n"), ("figures/drift.svg", b"<svg/>")],
    )
    .unwrap();
    assert_ne!(review.digest, monitoring.digest);
    let f = folder.to_str().unwrap();
    for args in [vec!["card", f], vec!["verify", f], vec!["predict", f, "leases.parquet", "--out", "scored.parquet"]] {
        let out = run_in(d, &args);
        assert!(out.status.success(), "{args:?}: {}{}", stdout(&out), stderr(&out));
    }
    assert_eq!(digest(&folder), before, "attached records never move the results digest");
    assert_eq!(std::fs::read(folder.join("integrity.sha256")).unwrap(), evidence_list);

    // One byte flipped inside either record is named by its path.
    for file in ["comparisons/2026-12-03-model-risk/review.json", "monitoring/2027-01/figures/drift.svg"] {
        let path = folder.join(file);
        let original = std::fs::read(&path).unwrap();
        let mut flipped = original.clone();
        flipped[0] ^= 0x01;
        std::fs::write(&path, &flipped).unwrap();
        for args in [vec!["card", f], vec!["verify", f], vec!["predict", f, "leases.parquet", "--out", "again.parquet"]] {
            let out = run_in(d, &args);
            assert_eq!(out.status.code(), Some(6), "{args:?}: {}", stderr(&out));
            assert!(stderr(&out).contains(&format!("{}: was changed after it was recorded", path.display())), "{}", stderr(&out));
        }
        std::fs::write(&path, &original).unwrap();
    }
    // A stray file elsewhere is still named, and so is a loose file beside the records.
    for stray in ["notes.txt", "monitoring/loose.txt"] {
        std::fs::write(folder.join(stray), "x").unwrap();
        let out = run_in(d, &["verify", f]);
        assert_eq!(out.status.code(), Some(6), "{}", stderr(&out));
        assert!(stderr(&out).contains(stray), "{stray}: {}", stderr(&out));
        std::fs::remove_file(folder.join(stray)).unwrap();
    }
    let out = run_in(d, &["verify", f]);
    assert!(out.status.success(), "{}", stderr(&out));

    // A review record is judged by itself (tests/reviews.rs): one that no longer matches its own
    // list, or a loose file under reviews/, is a review that does not hold (verify exits 10,
    // naming it), never a reason to refuse the model.
    std::fs::create_dir_all(folder.join("reviews")).unwrap();
    std::fs::write(folder.join("reviews/loose.txt"), "x").unwrap();
    let out = run_in(d, &["verify", f]);
    assert_eq!(out.status.code(), Some(10), "{}{}", stdout(&out), stderr(&out));
    assert!(
        stdout(&out).contains("loose.txt: review: RECORD CHANGED") && stdout(&out).contains("is not a sealed record"),
        "{}",
        stdout(&out)
    );
    let out = run_in(d, &["predict", f, "leases.parquet", "--out", "scored-again.parquet"]);
    assert!(out.status.success(), "{}", stderr(&out));
}

/// Asserts that a ledger line fits the shape tabcard 0.5 reads (`tests/data/ledger-0.5-shape.json`):
/// no key it does not know, every key it needs, each of a type it allows.
fn assert_fits_0_5(line: &str) {
    let shape: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(repo_path("tests/data/ledger-0.5-shape.json")).unwrap()).unwrap();
    let keys = shape["keys"].as_object().unwrap();
    let allowed = |key: &str, kind: &str| keys[key].as_array().unwrap().iter().any(|k| k == kind);
    let value: serde_json::Value = serde_json::from_str(line).unwrap();
    let line_keys = value.as_object().unwrap();
    for (key, v) in line_keys {
        assert!(keys.contains_key(key), "`{key}` is not a key tabcard 0.5 reads: {line}");
        let kind = match v {
            serde_json::Value::Null => "null",
            serde_json::Value::Bool(_) => "bool",
            serde_json::Value::Number(_) => "number",
            serde_json::Value::String(_) => "string",
            serde_json::Value::Array(_) => "array",
            serde_json::Value::Object(_) => "object",
        };
        assert!(allowed(key, kind), "`{key}` holds a {kind}, which tabcard 0.5 does not read there: {line}");
    }
    for key in keys.keys() {
        assert!(line_keys.contains_key(key) || allowed(key, "absent"), "`{key}` is missing: {line}");
    }
}

#[test]
fn ledger_lines_keep_the_shape_tabcard_0_5_reads_and_old_layouts_stay_readable() {
    // tests/data/results-v3/ was written by tabcard 0.5.0 (commit d139d88) from small.toml on the
    // first 500 rows of the invented lease table: results layout 3, one ledger line.
    let dir = tempfile::tempdir().unwrap();
    copy_dir(&repo_path("tests/data/results-v3"), dir.path());
    let d = dir.path();
    let old_line = std::fs::read_to_string(d.join("results/ledger.jsonl")).unwrap();
    assert_fits_0_5(old_line.lines().next().unwrap());

    // A new train appends a selection line of that shape; verifications go to their own file.
    let fresh = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(fresh.path(), 300, "");
    let folder = trained(fresh.path(), &manifest);
    let ledger = std::fs::read_to_string(fresh.path().join("results/ledger.jsonl")).unwrap();
    assert_eq!(ledger.lines().count(), 1);
    assert_fits_0_5(ledger.lines().next().unwrap());
    let out = run_in(fresh.path(), &["verify", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert_eq!(std::fs::read_to_string(fresh.path().join("results/ledger.jsonl")).unwrap(), ledger, "verify adds no ledger line");
    assert!(fresh.path().join("results/verifications.jsonl").exists());

    // The layout-3 folder: listed, in the history, compared, scored at 0.5, its card rendered,
    // and verified bit for bit by this build (the engine's numbers did not change).
    let root = d.join("results");
    let old = experiment_folder(&root).unwrap();
    let f = old.to_str().unwrap();
    for args in [vec!["list", "--results", "results"], vec!["history", "--results", "results"], vec!["compare", f, f]] {
        let out = run_in(d, &args);
        assert!(out.status.success(), "{args:?}: {}", stderr(&out));
    }
    let out = run_in(d, &["predict", f, "leases.parquet", "--out", "scores.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let scores = std::fs::read_to_string(d.join("scores.csv")).unwrap();
    let second = scores.lines().nth(1).unwrap();
    assert!(second.contains(",0.5,,"), "a layout-3 folder decides at 0.5 with no favourable outcome declared: {second}");
    let out = run_in(d, &["card", f]);
    assert!(out.status.success(), "{}", stderr(&out));
    let card = std::fs::read_to_string(old.join("card.md")).unwrap();
    assert!(
        card.contains("this folder was trained before tabcard 0.6 recorded a declared decision, so `predict` decides at 0.5"),
        "{card}"
    );
    let out = run_in(d, &["verify", f, "--data", "leases.parquet"]);
    assert!(out.status.success(), "{}{}", stdout(&out), stderr(&out));
    assert!(stdout(&out).contains("verdict   verified"), "{}", stdout(&out));
}
