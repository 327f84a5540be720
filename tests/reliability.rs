//! Faults and hostile inputs never lose results or corrupt them: SIGKILL at several random points,
//! a full disk, two concurrent `train` processes on one experiment, tampered or foreign results
//! folders, and data that lives outside the project that holds the manifest.

mod common;

use common::*;
use std::path::{Path, PathBuf};
use std::time::Duration;
use tabcard::store::run::read_run;
use tabcard::store::Layout;

/// Every run folder under its final name passes its integrity check, and every JSON file parses.
fn assert_store_consistent(folder: &Path) {
    let layout = Layout::new(folder);
    if let Ok(entries) = std::fs::read_dir(layout.runs()) {
        for e in entries {
            let name = e.unwrap().file_name().to_string_lossy().into_owned();
            if name.starts_with('.') {
                continue;
            }
            let run = read_run(&layout, &name).unwrap_or_else(|e| panic!("run {name} is corrupt: {e}"));
            assert!(run.is_some());
        }
    }
    for e in std::fs::read_dir(folder).unwrap() {
        let p = e.unwrap().path();
        if p.extension().is_some_and(|x| x == "json") {
            let text = std::fs::read_to_string(&p).unwrap();
            serde_json::from_str::<serde_json::Value>(&text).unwrap_or_else(|e| panic!("{p:?} is not whole JSON: {e}"));
        }
    }
}

fn snapshot_runs(folder: &Path) -> Vec<(String, Vec<u8>)> {
    let mut out = Vec::new();
    let runs = folder.join("runs");
    let mut names: Vec<_> = std::fs::read_dir(&runs)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| !n.starts_with('.'))
        .collect();
    names.sort();
    for n in names {
        for f in ["result.json", "weights.safetensors", "history.csv"] {
            out.push((format!("{n}/{f}"), std::fs::read(runs.join(&n).join(f)).unwrap()));
        }
    }
    out
}

fn slow_experiment(dir: &Path) -> PathBuf {
    let manifest = small_lease_experiment(dir, 3000, "[sweep.grid]\n\"model.dropout\" = [0.0, 0.1, 0.2]\n");
    let text = std::fs::read_to_string(&manifest).unwrap().replace("epochs = 6", "epochs = 15");
    std::fs::write(&manifest, text).unwrap();
    manifest
}

#[test]
fn sigkill_at_random_points_never_leaves_a_partial_run_readable() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = slow_experiment(dir.path());
    let reference = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", "reference", "--jobs", "2"]);
    assert!(reference.status.success(), "{}", stderr(&reference));
    let expected = snapshot_runs(&experiment_folder(&dir.path().join("reference")).unwrap());
    let mut stream = tabcard::rng::Stream::new(99, tabcard::rng::Purpose::Shuffle);
    for attempt in 0..4 {
        let results = format!("killed-{attempt}");
        let delay = Duration::from_millis(30 + stream.below(900));
        let mut child = bin()
            .current_dir(dir.path())
            .args(["train", manifest.to_str().unwrap(), "--results", &results, "--jobs", "2"])
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .spawn()
            .unwrap();
        std::thread::sleep(delay);
        child.kill().unwrap();
        child.wait().unwrap();
        if let Some(folder) = experiment_folder(&dir.path().join(&results)) {
            assert_store_consistent(&folder);
        }
        let resumed = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", &results, "--jobs", "2"]);
        assert!(resumed.status.success(), "attempt {attempt} after {delay:?}: {}", stderr(&resumed));
        let folder = experiment_folder(&dir.path().join(&results)).unwrap();
        assert_store_consistent(&folder);
        assert!(snapshot_runs(&folder) == expected, "attempt {attempt}: resumed runs differ from the reference");
    }
}

#[test]
fn two_concurrent_trains_of_one_experiment_agree() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = slow_experiment(dir.path());
    let spawn = || {
        bin()
            .current_dir(dir.path())
            .args(["train", manifest.to_str().unwrap(), "--results", "shared", "--jobs", "1"])
            .stdout(std::process::Stdio::piped())
            .stderr(std::process::Stdio::piped())
            .spawn()
            .unwrap()
    };
    let (a, b) = (spawn(), spawn());
    let (a, b) = (a.wait_with_output().unwrap(), b.wait_with_output().unwrap());
    assert!(a.status.success(), "{}", stderr(&a));
    assert!(b.status.success(), "{}", stderr(&b));
    let folder = experiment_folder(&dir.path().join("shared")).unwrap();
    assert_store_consistent(&folder);
    let reference = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", "alone", "--jobs", "2"]);
    assert!(reference.status.success());
    assert!(snapshot_runs(&folder) == snapshot_runs(&experiment_folder(&dir.path().join("alone")).unwrap()));
    // One writer at a time: every run trained once, by one of the two; the other found them stored
    // and added no ledger line (one line per completed selection).
    let planned: usize = [&a, &b]
        .iter()
        .find_map(|o| {
            stdout(o)
                .lines()
                .find(|l| l.starts_with("runs: "))
                .and_then(|l| l.split(", ").last())
                .and_then(|p| p.split(' ').next())
                .and_then(|n| n.parse().ok())
        })
        .expect("one process trained");
    let trained: Vec<usize> = [&a, &b]
        .iter()
        .map(|o| {
            stdout(o)
                .lines()
                .find_map(|l| l.strip_prefix("runs: ").and_then(|r| r.split(' ').next()).and_then(|n| n.parse().ok()))
                .unwrap_or(0)
        })
        .collect();
    assert_eq!(trained.iter().sum::<usize>(), planned, "each run trained once: {trained:?}\n{}\n{}", stdout(&a), stdout(&b));
    // The other found the runs stored: after waiting for the first (it then says for whom; the
    // lock's unit test checks that message) or after the first had finished.
    assert!([&a, &b].iter().any(|o| stdout(o).contains("nothing to train")), "{}{}", stdout(&a), stdout(&b));
    let ledger = std::fs::read_to_string(dir.path().join("shared/ledger.jsonl")).unwrap();
    assert_eq!(ledger.lines().count(), 1);
    for line in ledger.lines() {
        serde_json::from_str::<serde_json::Value>(line).unwrap();
    }
}

#[test]
fn a_full_disk_gives_a_clear_error_and_no_corrupt_result() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2000, "[sweep.grid]\n\"model.hidden\" = [[16], [64, 64]]\n");
    let mount = dir.path().join("small-disk");
    std::fs::create_dir(&mount).unwrap();
    let mounted = std::process::Command::new("mount").args(["-t", "tmpfs", "-o", "size=160k", "tmpfs", mount.to_str().unwrap()]).status();
    if !mounted.is_ok_and(|s| s.success()) {
        eprintln!("skipped: cannot mount a size-limited tmpfs here (needs root)");
        return;
    }
    struct Unmount(PathBuf);
    impl Drop for Unmount {
        fn drop(&mut self) {
            let _ = std::process::Command::new("umount").arg(&self.0).status();
        }
    }
    let _guard = Unmount(mount.clone());
    let out = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", mount.to_str().unwrap(), "--jobs", "2"]);
    let err = stderr(&out);
    assert_eq!(out.status.code(), Some(3), "{err}");
    assert!(err.contains("No space left on device"), "{err}");
    // Whatever was written before the disk filled is whole, and no temporary run folder survives.
    let folder = experiment_folder(&mount).expect("the experiment folder was started");
    assert_store_consistent(&folder);
    let leftovers: Vec<String> = std::fs::read_dir(folder.join("runs"))
        .map(|d| d.map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).filter(|n| n.starts_with('.')).collect())
        .unwrap_or_default();
    assert!(leftovers.is_empty(), "temporary folders left behind: {leftovers:?}");
    assert!(!folder.join("card.md").exists() || std::fs::read_to_string(folder.join("card.md")).unwrap().contains("## Provenance"));
}

#[test]
fn tampered_or_foreign_results_fail_clearly() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 1500, "");
    let out = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let folder = experiment_folder(&dir.path().join("results")).unwrap();
    let copy = |name: &str| {
        let to = dir.path().join(name);
        let status = std::process::Command::new("cp").args(["-r", folder.to_str().unwrap(), to.to_str().unwrap()]).status().unwrap();
        assert!(status.success());
        to
    };
    let no_panic = |o: &std::process::Output| assert_ne!(o.status.code(), Some(101), "panicked: {}", stderr(o));

    // A results folder written by a newer tool (layout version 99), whose integrity list is whole.
    let newer = copy("newer");
    std::fs::write(newer.join("format.json"), "{\"format\": \"tabcard-results\", \"version\": 99, \"tool_version\": \"9.0.0\"}\n").unwrap();
    tabcard::store::integrity::seal(&newer, |_| Ok(())).unwrap();
    for args in [vec!["card", "newer"], vec!["verify", "newer"], vec!["predict", "newer", "leases.parquet", "--out", "p.parquet"]] {
        let o = run_in(dir.path(), &args);
        no_panic(&o);
        let expected = format!(
            "error: newer/format.json: results layout version 99 written by tabcard 9.0.0; this tabcard {} reads versions [2, 3, 4, 5, 6, 7, 8, 9, 10]",
            env!("CARGO_PKG_VERSION")
        );
        assert_eq!(stderr(&o).trim_end(), expected, "{args:?}");
    }
    // A folder of layout version 1 (before integrity lists) is named as such.
    let older = copy("older");
    std::fs::write(older.join("format.json"), "{\"format\": \"tabcard-results\", \"version\": 1, \"tool_version\": \"0.3.0\"}\n").unwrap();
    std::fs::remove_file(older.join("integrity.sha256")).unwrap();
    let o = run_in(dir.path(), &["verify", "older"]);
    assert_eq!(o.status.code(), Some(3));
    assert!(
        stderr(&o).starts_with(
            "error: older/format.json: results layout version 1, written by tabcard 0.3.0 before results folders carried integrity.sha256"
        ),
        "{}",
        stderr(&o)
    );
    let unknown = copy("unknown");
    std::fs::remove_file(unknown.join("format.json")).unwrap();
    let o = run_in(dir.path(), &["card", "unknown"]);
    assert_eq!(stderr(&o).trim_end(), "error: unknown: is not a tabcard results folder (no format.json)");

    // Edited JSON: caught by the folder's integrity list (exit 6); and, where a forger rewrote the
    // list too, by the reader.
    let edited = copy("edited");
    std::fs::write(edited.join("selection.json"), "{\"metric\": 3").unwrap();
    let cases = || [vec!["card", "edited"], vec!["verify", "edited"], vec!["predict", "edited", "leases.parquet", "--out", "p.parquet"]];
    for args in cases() {
        let o = run_in(dir.path(), &args);
        no_panic(&o);
        assert_eq!(o.status.code(), Some(6), "{args:?}: {}", stderr(&o));
        assert!(stderr(&o).starts_with("error: edited/selection.json: was changed after it was recorded"), "{args:?}: {}", stderr(&o));
    }
    tabcard::store::integrity::seal(&edited, |_| Ok(())).unwrap();
    for args in cases() {
        let o = run_in(dir.path(), &args);
        no_panic(&o);
        assert!(stderr(&o).starts_with("error: edited/selection.json: unreadable or tampered JSON: "), "{args:?}: {}", stderr(&o));
    }

    // A truncated weights file.
    let truncated = copy("truncated");
    let selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(truncated.join("selection.json")).unwrap()).unwrap();
    let run = selection["selected_run"].as_str().unwrap().to_string();
    let weights = truncated.join("runs").join(&run).join("weights.safetensors");
    let bytes = std::fs::read(&weights).unwrap();
    std::fs::write(&weights, &bytes[..bytes.len() / 3]).unwrap();
    let o = run_in(dir.path(), &["predict", "truncated", "leases.parquet", "--out", "p.parquet"]);
    assert!(
        stderr(&o).starts_with(&format!("error: truncated/runs/{run}/weights.safetensors: was changed after it was recorded")),
        "{}",
        stderr(&o)
    );
    // With the folder's list rewritten, the run's own index still catches it.
    tabcard::store::integrity::seal(&truncated, |_| Ok(())).unwrap();
    for args in [vec!["card", "truncated"], vec!["predict", "truncated", "leases.parquet", "--out", "p.parquet"]] {
        let o = run_in(dir.path(), &args);
        no_panic(&o);
        assert!(
            stderr(&o).contains(&format!("truncated/runs/{run}/weights.safetensors: fails its integrity check")),
            "{args:?}: {}",
            stderr(&o)
        );
    }
    assert!(!dir.path().join("p.parquet").exists());
}

#[test]
fn data_outside_the_project_is_reported() {
    let dir = tempfile::tempdir().unwrap();
    let data_dir = dir.path().join("shared-data");
    let exp_dir = dir.path().join("experiments");
    std::fs::create_dir_all(&data_dir).unwrap();
    std::fs::create_dir_all(&exp_dir).unwrap();
    let manifest = small_lease_experiment(&data_dir, 1500, "");
    let text = std::fs::read_to_string(&manifest).unwrap();
    std::fs::write(exp_dir.join("dotdot.toml"), text.replace("path = \"leases.parquet\"", "path = \"../shared-data/leases.parquet\""))
        .unwrap();
    std::os::unix::fs::symlink(data_dir.join("leases.parquet"), exp_dir.join("linked.parquet")).unwrap();
    std::fs::write(exp_dir.join("symlink.toml"), text.replace("path = \"leases.parquet\"", "path = \"linked.parquet\"")).unwrap();
    // Outside git, the project is the manifest's folder: both files leave it.
    let note = "note: the data file lies outside the project that holds the manifest";
    for m in ["dotdot.toml", "symlink.toml"] {
        let o = run_in(&exp_dir, &["check", m]);
        assert!(o.status.success(), "{}", stderr(&o));
        assert!(stdout(&o).contains(note), "{m}: {}", stdout(&o));
        let o = run_in(&exp_dir, &["train", m, "--results", "results", "--jobs", "2"]);
        assert!(o.status.success(), "{}", stderr(&o));
    }
    let inside = run_in(&data_dir, &["check", "small.toml"]);
    assert!(!stdout(&inside).contains(note));
    let folder = experiment_folder(&exp_dir.join("results")).unwrap();
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(
        card.contains("**The file lies outside the project that holds the manifest**"),
        "the card must say the data does not travel with a checkout"
    );
    let record = std::fs::read_to_string(folder.join("experiment.json")).unwrap();
    assert!(!record.contains(&dir.path().display().to_string()), "experiment.json holds an absolute path: {record}");
    // In a git work tree holding both folders, the same layout is one project: no note.
    std::fs::create_dir(dir.path().join(".git")).unwrap();
    for m in ["dotdot.toml", "symlink.toml"] {
        let o = run_in(&exp_dir, &["check", m]);
        assert!(o.status.success() && !stdout(&o).contains(note), "{m}: {}", stdout(&o));
    }
}
