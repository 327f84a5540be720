//! No run is trained twice: runs are named by what decides their bits (the data's content, target,
//! split, fitted preprocessing, head, history metric, tool and kernel versions, with the run's own
//! settings and seed), not by the whole manifest. A second experiment that differs only in its
//! descriptive fields trains nothing; one with a value added to a grid key trains only the new
//! configuration's runs. The others are copied, checked, from the first experiment's folder, and
//! every folder stays whole on its own: `verify` reproduces it and `sha256sum -c` (coreutils)
//! checks its lists.

mod common;

use common::*;
use serde_json::Value;
use std::path::{Path, PathBuf};
use std::process::Command;

/// `train --json` of `manifest` into `dir/results`: the experiment folder and the report.
fn train(dir: &Path, manifest: &Path) -> (PathBuf, Value) {
    let out = run_in(dir, &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2", "--json"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let report: Value = serde_json::from_str(&stdout(&out)).unwrap();
    let folder = report["results"].as_str().map(PathBuf::from).expect("the report names its results folder");
    (dir.join(folder), report)
}

fn names(v: &Value) -> Vec<String> {
    v.as_array().unwrap().iter().map(|x| x.as_str().unwrap_or_else(|| x["run"].as_str().unwrap()).to_string()).collect()
}

/// `verify` reproduces the folder bit for bit and `sha256sum -c` accepts both of its lists.
fn whole_on_its_own(dir: &Path, folder: &Path) {
    let out = run_in(dir, &["verify", folder.to_str().unwrap(), "--jobs", "2"]);
    assert!(out.status.success(), "verify {}: {}\n{}", folder.display(), stdout(&out), stderr(&out));
    if let Ok(out) =
        Command::new("sha256sum").args(["-c", "--quiet", "--strict", "integrity.sha256", "records.sha256"]).current_dir(folder).output()
    {
        assert!(out.status.success(), "sha256sum -c in {}: {}", folder.display(), String::from_utf8_lossy(&out.stdout));
    }
}

#[test]
fn a_description_edit_trains_nothing_and_an_added_grid_value_trains_only_its_runs() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let grid = |values: &str| format!("\n[sweep.grid]\n\"model.dropout\" = [{values}]\n");
    let manifest = small_lease_experiment(d, 600, &grid("0.0, 0.1"));
    let (first, report) = train(d, &manifest);
    let first_runs = names(&report["runs"]["trained"]);
    assert_eq!(first_runs.len(), 6, "2 configurations and the baseline, 2 seeds each");

    // The description edited: a new experiment (a new fingerprint and folder), nothing trained.
    let text = std::fs::read_to_string(&manifest).unwrap();
    let described = text.replace("name = \"small-lease\"", "name = \"small-lease\"\ndescription = \"the same model, described\"");
    std::fs::write(&manifest, &described).unwrap();
    let (second, report) = train(d, &manifest);
    assert_ne!(second, first, "a new fingerprint, a new folder");
    assert!(names(&report["runs"]["trained"]).is_empty(), "no run trained: {report}");
    let copied = names(&report["runs"]["copied"]);
    assert_eq!(copied, first_runs, "every run copied from the first folder");
    assert!(report["runs"]["copied"]
        .as_array()
        .unwrap()
        .iter()
        .all(|c| c["from"].as_str().unwrap().ends_with(first.file_name().unwrap().to_str().unwrap())));
    let card = std::fs::read_to_string(second.join("card.md")).unwrap();
    assert!(card.contains("the same model, described"), "a new card, with the new description");
    for run in &first_runs {
        let (a, b) = (first.join("runs").join(run), second.join("runs").join(run));
        assert!(!std::fs::symlink_metadata(&b).unwrap().file_type().is_symlink(), "a copy, never a link");
        for file in ["weights.safetensors", "history.csv", "result.json", "settings.json", "checksums.json", "validation-predictions.csv"] {
            assert_eq!(std::fs::read(a.join(file)).unwrap(), std::fs::read(b.join(file)).unwrap(), "{run}/{file}");
        }
        let timing: Value = serde_json::from_slice(&std::fs::read(b.join("timing.json")).unwrap()).unwrap();
        assert_eq!(timing["copied_from"], first.file_name().unwrap().to_str().unwrap());
    }

    // A value added to the grid: only the new configuration's two runs are trained.
    std::fs::write(&manifest, described.replace("[0.0, 0.1]", "[0.0, 0.1, 0.2]")).unwrap();
    let (third, report) = train(d, &manifest);
    let trained = names(&report["runs"]["trained"]);
    assert_eq!(trained.len(), 2, "the new configuration's 2 seeds: {report}");
    assert!(trained.iter().all(|r| !first_runs.contains(r)));
    assert_eq!(names(&report["runs"]["copied"]).len(), 6, "{report}");

    // `compare` names the runs two folders share.
    let out = run_in(d, &["compare", first.to_str().unwrap(), third.to_str().unwrap()]);
    assert!(stdout(&out).contains("6 of 8 runs shared"), "{}\n{}", stdout(&out), stderr(&out));

    // A copy whose source was tampered with is not taken: the run is trained again.
    let tampered = first.join("runs").join(&first_runs[0]).join("history.csv");
    let mut bytes = std::fs::read(&tampered).unwrap();
    bytes[0] ^= 0x01;
    std::fs::write(&tampered, bytes).unwrap();
    for folder in [&second, &third] {
        whole_on_its_own(d, folder);
    }
    std::fs::write(&manifest, described.replace("[0.0, 0.1]", "[0.1, 0.0]")).unwrap();
    let (fourth, report) = train(d, &manifest);
    let copied = names(&report["runs"]["copied"]);
    assert_eq!(names(&report["runs"]["trained"]), Vec::<String>::new(), "{report}");
    assert!(copied.contains(&first_runs[0]), "{report}");
    let source = report["runs"]["copied"].as_array().unwrap().iter().find(|c| c["run"] == first_runs[0].as_str()).unwrap()["from"].clone();
    assert!(
        !source.as_str().unwrap().ends_with(first.file_name().unwrap().to_str().unwrap()),
        "taken from an intact folder, not the tampered one: {source}"
    );
    whole_on_its_own(d, &fourth);
}
