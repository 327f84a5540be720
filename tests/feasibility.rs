//! Feasibility before work: a plan whose memory estimate exceeds what the process may use fails at
//! `check` and at `train` with exit 2 and the figures, before anything is written (regression for:
//! `hidden = [65536, 65536]` passed `check`, then `train` aborted on a failed 17 GB allocation with
//! exit 134 and left a folder without a card). Run under an address-space limit (`ulimit -v`).

mod common;

use common::*;
use std::process::Command;

/// `tabcard ARGS` in `dir` under `ulimit -v` of `kib` KiB.
fn limited(dir: &std::path::Path, kib: u64, args: &[&str]) -> std::process::Output {
    let exe = env!("CARGO_BIN_EXE_tabcard");
    let script = format!("ulimit -v {kib} && exec \"$0\" \"$@\"");
    Command::new("sh").arg("-c").arg(script).arg(exe).args(args).current_dir(dir).output().unwrap()
}

#[test]
fn an_infeasible_plan_fails_at_check_and_train_with_the_figures() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 300, "");
    let huge = dir.path().join("huge.toml");
    std::fs::write(&huge, std::fs::read_to_string(&manifest).unwrap().replace("hidden = [16]", "hidden = [65536, 65536]")).unwrap();
    let limit_kib = 4 * 1024 * 1024;

    for command in ["check", "train"] {
        let out = limited(dir.path(), limit_kib, &[command, "huge.toml", "--results", "results"][..if command == "check" { 2 } else { 4 }]);
        assert_eq!(out.status.code(), Some(2), "{command}: {}", stderr(&out));
        let err = stderr(&out);
        assert!(err.starts_with("error: huge.toml: the plan needs an estimated "), "{command}: {err}");
        assert!(
            err.contains("MiB of memory, more than the ")
                && err.contains("MiB available: largest configuration model.hidden = [65536, 65536] with 429"),
            "{command}: {err}"
        );
        assert!(err.trim_end().ends_with("reduce `model.hidden` (or its grid values) or --jobs"), "{command}: {err}");
    }
    assert!(experiment_folder(&dir.path().join("results")).is_none(), "nothing is written");

    // The small plan fits under the same limit, and `check` prints its estimate.
    let out = limited(dir.path(), limit_kib, &["check", manifest.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    let line = stdout(&out).lines().find(|l| l.starts_with("memory ")).map(str::to_string).unwrap_or_default();
    assert!(line.contains("largest configuration model.hidden = [16] with ") && line.contains("(available: "), "{}", stdout(&out));
}

#[test]
fn the_estimate_counts_the_parameters_the_trainer_reports() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 300, "");
    let out = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "1"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let folder = experiment_folder(&dir.path().join("results")).unwrap();
    let exp = tabcard::experiment::open(&manifest).unwrap();
    let prepared = tabcard::experiment::prepared::Prepared::new(exp).unwrap();
    let width = prepared.exp.preprocessor.width();
    let outputs = prepared.exp.head().outputs();
    for config in &prepared.plan.configs {
        let run = prepared.plan.runs.iter().find(|r| r.config_id == config.id).unwrap();
        let metrics: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(folder.join("runs").join(&run.id).join("result.json")).unwrap()).unwrap();
        assert_eq!(
            tabcard::experiment::feasibility::parameter_count(config, width, outputs),
            metrics["parameter_count"].as_u64().unwrap(),
            "{}",
            config.id
        );
    }
    assert!(tabcard::experiment::feasibility::input_width_bound(&prepared.exp) >= width);
}

#[test]
fn the_advice_names_a_categorical_column_whose_one_hot_encoding_dominates() {
    use arrow::array::{ArrayRef, BooleanArray, Float64Array, StringArray};
    use std::sync::Arc;
    let dir = tempfile::tempdir().unwrap();
    let rows = 100_000;
    write_parquet(
        &dir.path().join("data.parquet"),
        vec![
            ("amount", Arc::new(Float64Array::from((0..rows).map(|r| (r % 97) as f64).collect::<Vec<_>>())) as ArrayRef),
            ("postcode", Arc::new(StringArray::from((0..rows).map(|r| format!("P{r:06}")).collect::<Vec<_>>()))),
            ("y", Arc::new(BooleanArray::from((0..rows).map(|r| r % 3 == 0).collect::<Vec<_>>()))),
        ],
    );
    std::fs::write(dir.path().join("m.toml"), manifest("features = [\"amount\", \"postcode\"]\n\n[model]\nhidden = [256, 256]\n")).unwrap();
    let out = limited(dir.path(), 3 * 1024 * 1024, &["check", "m.toml"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    let err = stderr(&out);
    assert!(err.contains("column `postcode` is one-hot encoded into up to 100002 of the 100004 input columns (100%)"), "{err}");
    assert!(err.trim_end().ends_with("list it in `data.drop`, or group its levels into fewer before training"), "{err}");
}
