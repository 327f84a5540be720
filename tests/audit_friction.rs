//! What an auditor and a new user trip over, fixed: the card says per file how git saw the
//! manifest and the data (an untracked manifest is never reported as committed); a plain copy
//! verifies from any working folder, and a moved table is named with `--data` in the error;
//! changed data gets advice that names the folder trained on the old data; split keys a split
//! column ignores are refused; `check` counts the parameters `train` trains; the demo tables are
//! never replaced silently.

mod common;

use common::*;
use std::path::Path;

fn git(dir: &Path, args: &[&str]) -> bool {
    std::process::Command::new("git")
        .arg("-C")
        .arg(dir)
        .args(["-c", "user.name=t", "-c", "user.email=t@example.org"])
        .args(args)
        .output()
        .is_ok_and(|o| o.status.success())
}

#[test]
fn the_card_says_how_git_saw_the_manifest_and_the_data_file() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    // A repository with one committed file: the manifest and the table are untracked.
    std::fs::write(d.join("README"), "x").unwrap();
    if !(git(d, &["init", "-q"]) && git(d, &["add", "README"]) && git(d, &["commit", "-q", "-m", "x"])) {
        eprintln!("git is not available: skipped");
        return;
    }
    let folder = trained(d, &manifest);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("(tracked files with uncommitted changes: no); manifest file untracked: git has never seen it; data file untracked: git has never seen it"), "{card}");

    // Committed, then the table changed in place: committed manifest, changed data file.
    assert!(git(d, &["add", "small.toml", "leases.parquet"]) && git(d, &["commit", "-q", "-m", "y"]));
    let more = tempfile::tempdir().unwrap();
    small_lease_experiment(more.path(), 301, "");
    std::fs::copy(more.path().join("leases.parquet"), d.join("leases.parquet")).unwrap();
    let out = run_in(d, &["train", "small.toml", "--results", "again"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let card = std::fs::read_to_string(experiment_folder(&d.join("again")).unwrap().join("card.md")).unwrap();
    assert!(card.contains("manifest file committed; data file changed since the last commit"), "{card}");
}

#[test]
fn a_plain_copy_verifies_from_any_working_folder_and_a_moved_table_is_named_with_data() {
    let dir = tempfile::tempdir().unwrap();
    let project = dir.path().join("project");
    std::fs::create_dir_all(project.join("experiments")).unwrap();
    let manifest = small_lease_experiment(&project.join("experiments"), 300, "");
    let out = run_in(&project, &["train", manifest.to_str().unwrap(), "--results", "results"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let folder = experiment_folder(&project.join("results")).unwrap();
    // From the project root, from the results folder and from elsewhere: the same verdict.
    for cwd in [project.clone(), folder.clone(), dir.path().to_path_buf()] {
        let out = run_in(&cwd, &["verify", folder.to_str().unwrap()]);
        assert!(out.status.success(), "from {}: {}{}", cwd.display(), stdout(&out), stderr(&out));
    }
    // The table moved: the error names where it was looked for and `--data`.
    let moved = dir.path().join("moved.parquet");
    std::fs::rename(project.join("experiments/leases.parquet"), &moved).unwrap();
    let out = run_in(dir.path(), &["verify", folder.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("is not where the results place it") && stderr(&out).contains("pass --data FILE"), "{}", stderr(&out));
    let out = run_in(dir.path(), &["verify", folder.to_str().unwrap(), "--data", moved.to_str().unwrap()]);
    assert!(out.status.success(), "{}{}", stdout(&out), stderr(&out));
}

#[test]
fn verify_of_a_manifest_whose_data_changed_names_the_folder_trained_on_the_old_data() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let more = tempfile::tempdir().unwrap();
    small_lease_experiment(more.path(), 301, "");
    std::fs::copy(more.path().join("leases.parquet"), d.join("leases.parquet")).unwrap();
    let out = run_in(d, &["verify", "small.toml"]);
    assert_eq!(out.status.code(), Some(3), "{}", stderr(&out));
    let err = stderr(&out);
    assert!(err.contains("results for this manifest exist") && err.contains(folder.file_name().unwrap().to_str().unwrap()), "{err}");
    assert!(err.contains("other data (content SHA-256") && err.contains("--data"), "{err}");
    assert!(!err.contains("train it first"), "{err}");
}

#[test]
fn check_counts_the_parameters_train_trains() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // A categorical feature with few levels: the encoded width is far below the bound.
    let manifest = small_lease_experiment(d, 300, "");
    let text = std::fs::read_to_string(&manifest)
        .unwrap()
        .replace("ids = [\"application_id\"]", "ids = [\"application_id\"]\ncategorical = [\"term_months\"]");
    std::fs::write(&manifest, text).unwrap();
    let out = run_in(d, &["check", "small.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let said: usize = stdout(&out)
        .split(" parameters")
        .next()
        .and_then(|s| s.rsplit(' ').next())
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("{}", stdout(&out)));
    let folder = trained(d, &manifest);
    let selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(folder.join("selection.json")).unwrap()).unwrap();
    let largest = selection["configs"].as_array().unwrap().iter().map(|c| c["parameter_count"].as_u64().unwrap()).max().unwrap();
    assert_eq!(said as u64, largest, "check's count is the trained one");
}

#[test]
fn demo_tables_are_left_alone_when_equal_and_replaced_only_with_force() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    assert!(run_in(d, &["demo-data", "demo"]).status.success());
    let out = run_in(d, &["demo-data", "demo"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).contains("unchanged"), "{}", stdout(&out));
    let before = std::fs::read(d.join("demo/lease-applications.parquet")).unwrap();
    let out = run_in(d, &["demo-data", "demo", "--seed", "7"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("exists; pass --force to replace it"), "{}", stderr(&out));
    assert_eq!(std::fs::read(d.join("demo/lease-applications.parquet")).unwrap(), before);
    assert!(run_in(d, &["demo-data", "demo", "--seed", "7", "--force"]).status.success());
    assert_ne!(std::fs::read(d.join("demo/lease-applications.parquet")).unwrap(), before);
}

#[test]
fn the_shipped_demos_check_without_notes_about_themselves() {
    for manifest in ["experiments/lease-default.toml", "experiments/greenhouse-yield.toml"] {
        let out = run_in(&repo_path(""), &["check", manifest]);
        assert!(out.status.success(), "{}", stderr(&out));
        assert!(!stderr(&out).contains("overridden by the grid") && !stdout(&out).contains("overridden by the grid"), "{manifest}");
    }
}
