//! `tabcard train` end to end on a small invented lease table: worker count and RAYON_NUM_THREADS
//! do not change a byte of the results (timing lives in timing.json), a rerun trains nothing, and a
//! sweep killed with SIGKILL resumes without retraining or changing finished runs.

mod common;

use common::*;
use std::collections::BTreeMap;
use std::path::Path;
use std::time::{Duration, Instant};

/// Every file under `root` (relative path -> bytes), without timing files and with the card's
/// training-time line masked.
fn snapshot(root: &Path) -> BTreeMap<String, Vec<u8>> {
    fn walk(dir: &Path, root: &Path, out: &mut BTreeMap<String, Vec<u8>>) {
        for entry in std::fs::read_dir(dir).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                walk(&path, root, out);
                continue;
            }
            let rel = path.strip_prefix(root).unwrap().to_string_lossy().into_owned();
            if rel.ends_with("timing.json") {
                continue;
            }
            let mut bytes = std::fs::read(&path).unwrap();
            if rel.ends_with("card.md") {
                let text = String::from_utf8(bytes).unwrap();
                bytes = text.lines().filter(|l| !l.contains("Trained at")).collect::<Vec<_>>().join("\n").into_bytes();
            }
            if rel.ends_with("integrity.sha256") || rel.ends_with("records.sha256") {
                // The card's line follows its "Trained at" line; the evidence lines must agree.
                let text = String::from_utf8(bytes).unwrap();
                bytes = text.lines().filter(|l| !l.ends_with("  card.md")).collect::<Vec<_>>().join("\n").into_bytes();
            }
            out.insert(rel, bytes);
        }
    }
    let mut out = BTreeMap::new();
    walk(root, root, &mut out);
    out
}

fn train(dir: &Path, manifest: &Path, results: &str, jobs: &str, rayon: &str) -> std::process::Output {
    bin()
        .current_dir(dir)
        .args(["train", manifest.to_str().unwrap(), "--results", results, "--jobs", jobs])
        .env("RAYON_NUM_THREADS", rayon)
        .output()
        .unwrap()
}

const GRID: &str = "[sweep.grid]\n\"model.dropout\" = [0.0, 0.2]\n";

#[test]
fn worker_count_and_thread_settings_do_not_change_the_results() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2000, GRID);
    let one = train(dir.path(), &manifest, "one", "1", "1");
    assert!(one.status.success(), "{}", stderr(&one));
    let two = train(dir.path(), &manifest, "two", "2", "2");
    assert!(two.status.success(), "{}", stderr(&two));
    let (a, b) = (experiment_folder(&dir.path().join("one")).unwrap(), experiment_folder(&dir.path().join("two")).unwrap());
    assert_eq!(a.file_name(), b.file_name(), "same experiment fingerprint");
    let (sa, sb) = (snapshot(&a), snapshot(&b));
    assert_eq!(sa.keys().collect::<Vec<_>>(), sb.keys().collect::<Vec<_>>());
    for (name, bytes) in &sa {
        assert!(bytes == &sb[name], "{name} differs between --jobs 1 and --jobs 2");
    }
    // 2 configurations x 2 seeds + the linear baseline x 2 seeds.
    assert_eq!(sa.keys().filter(|k| k.ends_with("weights.safetensors")).count(), 6);
    assert!(stdout(&one).contains("runs: 6 trained, 0 reused, 0 failed, 6 planned"), "{}", stdout(&one));

    let again = train(dir.path(), &manifest, "one", "2", "1");
    assert!(again.status.success());
    assert!(stdout(&again).contains("nothing to train: all 6 runs are stored and complete"), "{}", stdout(&again));
    assert_eq!(snapshot(&a), sa, "a rerun must not change the results");
    let ledger = std::fs::read_to_string(dir.path().join("one/ledger.jsonl")).unwrap();
    assert_eq!(ledger.lines().count(), 1, "one ledger line per completed selection: the rerun trained nothing and added none");
}

fn finished_runs(runs: &Path) -> Vec<String> {
    let Ok(entries) = std::fs::read_dir(runs) else { return Vec::new() };
    let mut out: Vec<String> =
        entries.map(|e| e.unwrap().file_name().to_string_lossy().into_owned()).filter(|n| !n.starts_with('.')).collect();
    out.sort();
    out
}

#[test]
fn a_killed_sweep_resumes_without_redoing_or_changing_finished_runs() {
    let dir = tempfile::tempdir().unwrap();
    let grid = "[sweep.grid]\n\"model.dropout\" = [0.0, 0.1, 0.2]\n";
    let manifest = small_lease_experiment(dir.path(), 4000, grid);
    let text = std::fs::read_to_string(&manifest).unwrap().replace("epochs = 6", "epochs = 100");
    std::fs::write(&manifest, text).unwrap();

    let reference = train(dir.path(), &manifest, "reference", "2", "1");
    assert!(reference.status.success(), "{}", stderr(&reference));
    let expected = snapshot(&experiment_folder(&dir.path().join("reference")).unwrap());

    let mut child = bin()
        .current_dir(dir.path())
        .args(["train", manifest.to_str().unwrap(), "--results", "killed", "--jobs", "1"])
        .stdout(std::process::Stdio::null())
        .stderr(std::process::Stdio::null())
        .spawn()
        .unwrap();
    let started = Instant::now();
    let runs_dir = loop {
        let found = std::fs::read_dir(dir.path().join("killed")).ok().and_then(|mut e| {
            e.find_map(|x| {
                let p = x.unwrap().path();
                p.is_dir().then(|| p.join("runs"))
            })
        });
        if let Some(runs) = found {
            if finished_runs(&runs).len() >= 2 {
                break runs;
            }
        }
        assert!(started.elapsed() < Duration::from_secs(120), "no runs finished");
        std::thread::sleep(Duration::from_millis(20));
    };
    child.kill().unwrap(); // SIGKILL
    child.wait().unwrap();
    let folder = runs_dir.parent().unwrap().to_path_buf();
    let done_before = finished_runs(&runs_dir);
    assert!(done_before.len() < 8, "the sweep finished before it could be killed");
    // Finished runs only: a kill that lands while a run is being written leaves a `.partial-*`
    // folder, which the resumed sweep removes.
    let before: BTreeMap<String, Vec<u8>> = snapshot(&runs_dir).into_iter().filter(|(name, _)| !name.starts_with(".partial-")).collect();

    let resumed = train(dir.path(), &manifest, "killed", "2", "1");
    assert!(resumed.status.success(), "{}", stderr(&resumed));
    let report = stdout(&resumed);
    assert!(report.contains(&format!("runs: {} trained, {} reused", 8 - done_before.len(), done_before.len())), "{report}");
    let after = snapshot(&runs_dir);
    for (name, bytes) in &before {
        assert!(&after[name] == bytes, "finished run file {name} changed on resume");
    }
    assert_eq!(snapshot(&folder), expected, "resumed results differ from an uninterrupted sweep");
}

#[test]
fn a_diverging_run_is_recorded_and_the_others_go_on() {
    let dir = tempfile::tempdir().unwrap();
    let grid = "[sweep.grid]\n\"training.learning_rate\" = [0.01, 1e30]\n";
    let manifest = small_lease_experiment(dir.path(), 2000, grid);
    let text = std::fs::read_to_string(&manifest)
        .unwrap()
        .replace("[training]", "[training]\noptimizer = \"sgd\"")
        .replace("seeds = [1, 2]", "seeds = [1]");
    std::fs::write(&manifest, text).unwrap();
    let out = train(dir.path(), &manifest, "results", "2", "1");
    assert_eq!(out.status.code(), Some(5), "{}", stderr(&out));
    let report = stdout(&out);
    assert!(report.contains("runs: 3 trained, 0 reused, 1 failed, 3 planned"), "{report}");
    assert!(report.contains("diverged in epoch 1: training loss became NaN"), "{report}");
    assert!(stderr(&out).contains("some runs failed or diverged"));
    let folder = experiment_folder(&dir.path().join("results")).unwrap();
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("Some runs failed or diverged"), "the card must state the failed run");
    // A rerun keeps the recorded divergence instead of retrying it, and still says so.
    let again = train(dir.path(), &manifest, "results", "2", "1");
    assert_eq!(again.status.code(), Some(5));
    assert!(stdout(&again).contains("nothing to train"), "{}", stdout(&again));
}

#[test]
fn shards_trained_apart_then_merged_equal_one_local_sweep() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2000, GRID);
    let local = train(dir.path(), &manifest, "local", "2", "1");
    assert!(local.status.success(), "{}", stderr(&local));

    // Three shards in three processes, as three array tasks would run them.
    let mut sizes = Vec::new();
    for k in 0..3 {
        let shard = format!("{k}/3");
        let out = bin()
            .current_dir(dir.path())
            .args(["train", manifest.to_str().unwrap(), "--results", "sharded", "--jobs", "1", "--shard", &shard])
            .output()
            .unwrap();
        assert!(out.status.success(), "{}", stderr(&out));
        let text = stdout(&out);
        assert!(text.contains(&format!("shard {shard}: 2 of 6 planned runs; 2 trained, 0 reused, 0 failed")), "{text}");
        sizes.push(finished_runs(&experiment_folder(&dir.path().join("sharded")).unwrap().join("runs")).len());
    }
    assert_eq!(sizes, [2, 4, 6], "each shard adds its own runs and none of another's");
    let folder = experiment_folder(&dir.path().join("sharded")).unwrap();
    assert!(!folder.join("selection.json").exists() && !folder.join("card.md").exists(), "a shard neither selects nor writes the card");
    assert!(!dir.path().join("sharded/ledger.jsonl").exists(), "a shard writes no ledger line");

    let merge = train(dir.path(), &manifest, "sharded", "2", "1");
    assert!(merge.status.success(), "{}", stderr(&merge));
    assert!(stdout(&merge).contains("runs: 0 trained, 6 reused, 0 failed, 6 planned"), "{}", stdout(&merge));
    let (a, b) = (snapshot(&experiment_folder(&dir.path().join("local")).unwrap()), snapshot(&folder));
    assert_eq!(a.keys().collect::<Vec<_>>(), b.keys().collect::<Vec<_>>());
    for (name, bytes) in &a {
        assert!(bytes == &b[name], "{name} differs between the sharded and the local sweep");
    }

    let bad = bin().current_dir(dir.path()).args(["train", manifest.to_str().unwrap(), "--shard", "3/3"]).output().unwrap();
    assert_eq!(bad.status.code(), Some(2), "{}", stderr(&bad));
    assert!(stderr(&bad).contains("--shard"), "{}", stderr(&bad));
}
