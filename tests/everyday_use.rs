//! Everyday use as a new user meets it: progress lines when stderr is not a terminal (one per
//! run, none with --quiet), the grid-override note, compare on manifests, a scaffold that passes
//! `check` unchanged, `--json` reports that parse with their documented fields, help with an
//! example per command, and results folders of layout 2 (tabcard 0.3.0) still readable.

mod common;

use common::*;
use serde_json::Value;

fn json_of(o: &std::process::Output) -> Value {
    assert!(o.status.success(), "{}", stderr(o));
    serde_json::from_str(&stdout(o)).unwrap_or_else(|e| panic!("not JSON ({e}): {}", stdout(o)))
}

#[test]
fn train_and_verify_print_one_progress_line_per_run_and_nothing_when_quiet() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 1200, "[sweep.grid]\n\"model.dropout\" = [0.0, 0.1]\n");
    let out = run_in(dir.path(), &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let err = stderr(&out);
    let lines: Vec<&str> = err.lines().collect();
    assert!(lines[0].starts_with("experiment small-lease (") && lines[0].contains("6 runs planned"), "{err}");
    let runs: Vec<&&str> = lines.iter().filter(|l| l.starts_with('[')).collect();
    assert_eq!(runs.len(), 6, "one line per run: {err}");
    for (i, l) in runs.iter().enumerate() {
        assert!(l.starts_with(&format!("[{}/6] run ", i + 1)) && l.contains("completed, validation roc_auc "), "{l}");
    }
    assert!(err.contains("6 runs to train, 0 already stored"), "{err}");
    // The phase after training says what it does, since it can take long on a large table.
    let last_run = lines.iter().rposition(|l| l.starts_with('[')).unwrap();
    assert!(lines[last_run + 1..].iter().any(|l| l.starts_with("select and test: the selection rule over 3 configurations")), "{err}");
    let folder = experiment_folder(&dir.path().join("results")).unwrap();
    let out = run_in(dir.path(), &["verify", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert_eq!(stderr(&out).lines().filter(|l| l.starts_with('[') && l.ends_with(", identical")).count(), 2, "{}", stderr(&out));
    assert!(stderr(&out).contains("2 runs to retrain and compare with the stored ones"), "verify trains nothing to keep: {}", stderr(&out));

    let quiet = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(quiet.path(), 1200, "");
    let out = run_in(quiet.path(), &["--quiet", "train", manifest.to_str().unwrap(), "--results", "results"]);
    assert!(out.status.success());
    assert_eq!(stderr(&out), "", "--quiet prints no progress");
    assert!(stdout(&out).contains("selected run"), "the report still prints");
}

#[test]
fn a_manifest_key_the_grid_overrides_is_reported_by_check_and_train() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 800, "[sweep.grid]\n\"model.dropout\" = [0.0, 0.2]\n");
    let text = std::fs::read_to_string(&manifest).unwrap().replace("[model]\nhidden = [16]\n", "[model]\nhidden = [16]\ndropout = 0.1\n");
    std::fs::write(&manifest, text).unwrap();
    let note = "note: model.dropout = 0.1 is overridden by the grid, which trains [0.0, 0.2]";
    let check = run_in(dir.path(), &["check", "small.toml"]);
    assert!(stdout(&check).contains(note), "{}", stdout(&check));
    let train = run_in(dir.path(), &["train", "small.toml", "--results", "results"]);
    assert!(stderr(&train).contains(note), "{}", stderr(&train));
    // Without the section key there is nothing to report.
    let plain = small_lease_experiment(dir.path(), 800, "[sweep.grid]\n\"model.dropout\" = [0.0, 0.2]\n");
    assert!(!stdout(&run_in(dir.path(), &["check", plain.to_str().unwrap()])).contains("overridden"));
}

#[test]
fn compare_takes_manifests_and_says_which_runs_would_be_new() {
    let dir = tempfile::tempdir().unwrap();
    let a = small_lease_experiment(dir.path(), 800, "");
    let text = std::fs::read_to_string(&a).unwrap();
    std::fs::write(dir.path().join("b.toml"), text.replace("hidden = [16]", "hidden = [32]")).unwrap();
    trained(dir.path(), &a);
    let out = run_in(dir.path(), &["compare", "small.toml", "b.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let report = stdout(&out);
    assert!(report.contains("model.hidden: [16] -> [32]"), "{report}");
    assert!(report.contains("runs of A: 4 planned, 4 already stored under results, 0 a `train` would add"), "{report}");
    assert!(report.contains("runs of B: 4 planned, 0 already stored under results, 4 a `train` would add"), "{report}");
    assert!(report.contains("file SHA-256 same"));
    let j = json_of(&run_in(dir.path(), &["--json", "compare", "small.toml", "b.toml"]));
    assert_eq!(j["manifest_changes"][0]["key"], "model.hidden");
    assert_eq!(j["runs_b"]["new"].as_array().unwrap().len(), 4);
}

#[test]
fn scaffolded_manifests_pass_check_unchanged() {
    // The demo tables (invented) and two open tables shipped with scikit-learn 1.9.1 (see
    // tests/data/open/): a binary, a multiclass and a regression target, the last column each.
    let dir = tempfile::tempdir().unwrap();
    let demo = dir.path().join("data");
    let out = run_in(dir.path(), &["demo-data", demo.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    let open = |f: &str| repo_path(&format!("tests/data/open/{f}"));
    let cases = [
        (demo.join("lease-applications.parquet"), "binary", "application_id"),
        (demo.join("greenhouse-yield.parquet"), "regression", ""),
        (open("iris.parquet"), "multiclass", ""),
        (open("breast_cancer.parquet"), "binary", ""),
    ];
    for (i, (data, task, id)) in cases.iter().enumerate() {
        let m = dir.path().join("experiments").join(format!("m{i}.toml"));
        std::fs::create_dir_all(m.parent().unwrap()).unwrap();
        let out = run_in(dir.path(), &["scaffold", data.to_str().unwrap(), "--out", m.to_str().unwrap()]);
        assert!(out.status.success(), "{}", stderr(&out));
        let text = std::fs::read_to_string(&m).unwrap();
        assert!(text.contains(&format!("task = \"{task}\"")), "{}: {text}", data.display());
        if !id.is_empty() {
            assert!(text.contains(&format!("ids = [\"{id}\"]")), "{text}");
        }
        for section in ["[experiment]", "[data]", "[split]", "[model]", "[training]", "[training.early_stopping]", "[selection]", "[sweep]"]
        {
            assert!(text.contains(section), "{section} missing");
        }
        let check = run_in(dir.path(), &["check", m.to_str().unwrap()]);
        assert!(check.status.success(), "{}: {}", data.display(), stderr(&check));
    }
    // An existing file is kept unless --force.
    let again = run_in(dir.path(), &["scaffold", cases[0].0.to_str().unwrap(), "--out", "experiments/m0.toml"]);
    assert_eq!(again.status.code(), Some(2));
    assert!(stderr(&again).contains("exists; pass --force"), "{}", stderr(&again));
    // A target that is not a column is named with the nearest one.
    let wrong = run_in(dir.path(), &["scaffold", cases[0].0.to_str().unwrap(), "--target", "defaulted12m"]);
    assert!(
        stderr(&wrong).contains("column `defaulted12m`: named by --target but not in the file (did you mean `defaulted_12m`?)"),
        "{}",
        stderr(&wrong)
    );
}

#[test]
fn json_reports_parse_and_carry_their_documented_fields() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 800, "");
    let m = manifest.to_str().unwrap();
    let check = json_of(&run_in(dir.path(), &["--json", "check", m]));
    for field in
        ["experiment", "fingerprint", "manifest_sha256", "data", "split", "summary", "plan", "selection", "memory", "overridden_by_grid"]
    {
        assert!(!check[field].is_null(), "check --json lacks {field}");
    }
    let train = json_of(&run_in(dir.path(), &["--json", "--quiet", "train", m, "--results", "results"]));
    for field in ["experiment", "fingerprint", "results", "card", "results_digest", "runs", "selection"] {
        assert!(!train[field].is_null(), "train --json lacks {field}");
    }
    assert_eq!(train["runs"]["trained"].as_array().unwrap().len(), 4);
    assert_eq!(train["fingerprint"], check["fingerprint"]);
    let folder = train["results"].as_str().unwrap().to_string();
    let verify = json_of(&run_in(dir.path(), &["--json", "--quiet", "verify", &folder]));
    assert_eq!(verify["identical"], true);
    assert_eq!(verify["runs"].as_array().unwrap().len(), 2);
    let history = json_of(&run_in(dir.path(), &["--json", "history", "--results", "results"]));
    assert_eq!(history["selections"].as_array().unwrap().len(), 1);
    assert_eq!(history["verifications"][0]["identical"], true);
    let list = json_of(&run_in(dir.path(), &["--json", "list", "--results", "results"]));
    let listed = &list["experiments"][0];
    assert_eq!(listed["fingerprint"], check["fingerprint"]);
    assert_eq!(listed["verified"]["status"], "yes");
    let latest = &listed["verified"]["latest"];
    assert_eq!(
        (latest["runs_checked"].as_u64(), latest["runs_planned"].as_u64(), latest["all"].as_bool()),
        (Some(2), Some(4), Some(false))
    );
    assert!(latest["machine"].as_str().is_some_and(|m| !m.is_empty()) && latest["tool_version"].is_string());
    assert_eq!(listed["manifest"], "small.toml");
    let text = stdout(&run_in(dir.path(), &["list", "--results", "results"]));
    assert!(text.contains("yes: 2 of 4 runs on "), "what was verified is said: {text}");
    assert!(stdout(&run_in(dir.path(), &["history", "--results", "results"])).contains("yes: 2 of 4 runs on "));
    assert!(listed["test_value"].as_f64().is_some());
    let compare = json_of(&run_in(dir.path(), &["--json", "compare", &folder, &folder]));
    assert_eq!(compare["manifest_changes"].as_array().unwrap().len(), 0);
    assert!(compare["validation"].as_array().unwrap().iter().all(|r| r["within_noise"] == true));
    // Commands without a JSON report say so before doing anything.
    for args in [&["--json", "demo-data", "somewhere"][..], &["demo-data", "somewhere", "--json"][..]] {
        let out = run_in(dir.path(), args);
        assert_eq!(out.status.code(), Some(2), "{args:?}");
        assert!(!dir.path().join("somewhere").exists());
    }
    let after = json_of(&run_in(dir.path(), &["list", "--results", "results", "--json"]));
    assert_eq!(after["experiments"][0]["verified"]["status"], "yes", "--json after the command's name");
}

#[test]
fn every_command_has_help_with_an_example_and_described_arguments() {
    let dir = tempfile::tempdir().unwrap();
    let with_json = ["check", "train", "verify", "compare", "history", "list", "monitor", "log-check"];
    for command in [
        "scaffold",
        "check",
        "train",
        "slurm",
        "verify",
        "predict",
        "compare",
        "history",
        "list",
        "monitor",
        "card",
        "review",
        "log-check",
        "demo-data",
    ] {
        let out = run_in(dir.path(), &[command, "--help"]);
        assert!(out.status.success());
        let help = stdout(&out);
        assert!(help.contains("Example"), "{command} --help has no example:\n{help}");
        // Only the commands with a JSON report advertise `--json`, and they take it after their name.
        assert_eq!(help.contains("--json"), with_json.contains(&command), "{command} --help:\n{help}");
        // clap prints an argument without a description as a bare name: every argument line must
        // carry text after its name.
        for line in help.lines().filter(|l| l.starts_with("  <") || l.starts_with("      --") || l.starts_with("  -")) {
            let described = line.trim().split_once("  ").is_some_and(|(_, rest)| !rest.trim().is_empty());
            assert!(described, "{command}: undocumented argument `{}`", line.trim());
        }
    }
}

#[test]
fn results_of_layout_2_written_by_tabcard_0_3_stay_readable() {
    // tests/data/results-v2/ was written by tabcard 0.3.0 (commit d65e96d) from small.toml on the
    // first 500 rows of the invented lease table: run files still named metrics.json, config.json
    // and run.json, no split checks, `pr_auc`, and `mse` recorded as a classifier's loss.
    let dir = tempfile::tempdir().unwrap();
    copy_dir(&repo_path("tests/data/results-v2"), dir.path());
    let root = dir.path().join("results");
    let folder = experiment_folder(&root).unwrap();
    assert!(std::fs::read_dir(folder.join("runs")).unwrap().all(|r| r.unwrap().path().join("run.json").exists()));
    let f = folder.to_str().unwrap();
    let list = run_in(dir.path(), &["list", "--results", "results"]);
    assert!(list.status.success() && stdout(&list).contains("small-lease-v2"), "{}{}", stdout(&list), stderr(&list));
    let history = run_in(dir.path(), &["history", "--results", "results"]);
    assert!(history.status.success() && stdout(&history).contains("small-lease-v2"), "{}", stderr(&history));
    let compare = run_in(dir.path(), &["compare", f, f]);
    assert!(compare.status.success() && stdout(&compare).contains("within noise"), "{}", stderr(&compare));
    let predict = run_in(dir.path(), &["predict", f, "leases.parquet", "--out", "scores.parquet"]);
    assert!(predict.status.success(), "{}", stderr(&predict));
    assert_eq!(tabcard::data::parquet::read_table(&dir.path().join("scores.parquet")).unwrap().rows, 500);
    let card = run_in(dir.path(), &["card", f]);
    assert!(card.status.success(), "{}", stderr(&card));
    let text = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(text.contains("duplicates not counted by the tabcard version that wrote these results"), "{text}");
    // A layout this tool does not know is refused by name.
    let format = folder.join("format.json");
    std::fs::write(&format, std::fs::read_to_string(&format).unwrap().replace("\"version\": 2", "\"version\": 99")).unwrap();
    let out = run_in(dir.path(), &["list", "--results", "results"]);
    assert!(stdout(&out).contains("unreadable:") && stdout(&out).contains("results layout version 99"), "{}", stdout(&out));
}

#[test]
fn check_stays_short_on_a_wide_table() {
    use arrow::array::{ArrayRef, BooleanArray, Float64Array};
    use std::sync::Arc;
    let dir = tempfile::tempdir().unwrap();
    let rows = 100;
    let names: Vec<String> = (0..3000).map(|i| format!("c{i:04}")).chain((0..50).map(|i| format!("k{i:02}"))).collect();
    let mut columns: Vec<(&str, ArrayRef)> = names
        .iter()
        .enumerate()
        .map(|(i, n)| {
            let values: Vec<f64> = (0..rows).map(|r| if i < 3000 { ((r * 31 + i * 7) % 97) as f64 } else { 1.0 }).collect();
            (n.as_str(), Arc::new(Float64Array::from(values)) as ArrayRef)
        })
        .collect();
    columns.push(("y", Arc::new(BooleanArray::from((0..rows).map(|r| r % 3 == 0).collect::<Vec<_>>()))));
    write_parquet(&dir.path().join("data.parquet"), columns);
    std::fs::write(dir.path().join("m.toml"), manifest("")).unwrap();
    let out = run_in(dir.path(), &["check", "m.toml"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let text = stdout(&out);
    assert!(text.lines().count() < 120, "{} lines for 3051 columns", text.lines().count());
    assert!(text.contains("... and 3011 more columns (3010 features, 1 others)"), "{text}");
    // 50 constant columns each give a warning: 20 are printed, the rest counted.
    assert_eq!(text.lines().filter(|l| l.starts_with("  - ")).count(), 20, "{text}");
    assert!(text.contains("more (`check --json` lists them all)"), "{text}");
    let json = json_of(&run_in(dir.path(), &["--json", "check", "m.toml"]));
    assert_eq!(json["summary"]["columns"].as_array().unwrap().len(), 3051);
}

#[test]
fn compare_judges_metrics_only_between_models_of_one_table_and_target() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let a = small_lease_experiment(d, 800, "");
    let text = std::fs::read_to_string(&a).unwrap();
    std::fs::write(d.join("b.toml"), text.replace("hidden = [16]", "hidden = [32]").replace("small-lease", "small-lease-wider")).unwrap();
    let folder_a = trained(d, &a);
    let folder_of = |name: &str| {
        std::fs::read_dir(d.join("results"))
            .unwrap()
            .map(|e| e.unwrap().path())
            .find(|p| p.is_dir() && std::fs::read_to_string(p.join("manifest.json")).unwrap().contains(name))
            .unwrap()
    };
    assert!(run_in(d, &["train", "b.toml", "--results", "results", "--quiet"]).status.success());
    let folder_b = folder_of("small-lease-wider");
    let same = stdout(&run_in(d, &["compare", folder_a.to_str().unwrap(), folder_b.to_str().unwrap()]));
    assert!(same.contains("selected configurations: A ") && same.contains("), B "), "both selected configurations are named: {same}");
    assert!(same.contains("(95% bootstrap interval"), "test intervals are shown: {same}");
    assert!(!same.contains("not judged"), "{same}");
    assert!(same.contains("within noise") || same.contains("better, beyond seed noise"), "{same}");
    // Another table and target: the figures are shown, never judged against seed noise.
    std::fs::copy(repo_path("tests/data/open/breast_cancer.parquet"), d.join("breast_cancer.parquet")).unwrap();
    std::fs::write(
        d.join("bc.toml"),
        "[experiment]\nname = \"bc\"\n[data]\npath = \"breast_cancer.parquet\"\ntarget = \"diagnosis\"\ntask = \"binary\"\n[model]\nhidden = [8]\n[training]\nepochs = 5\n[selection]\nbootstrap = 100\n[sweep]\nseeds = [1, 2]\n",
    )
    .unwrap();
    assert!(run_in(d, &["train", "bc.toml", "--results", "results", "--quiet"]).status.success());
    let folder_bc = folder_of("\"bc\"");
    let out = run_in(d, &["compare", folder_a.to_str().unwrap(), folder_bc.to_str().unwrap()]);
    let report = stdout(&out);
    assert!(report.contains("metrics: shown, not judged: A predicts `defaulted_12m` and B `diagnosis`"), "{report}");
    assert!(!report.contains("beyond seed noise") && !report.contains("within noise"), "{report}");
    let j = json_of(&run_in(d, &["compare", folder_a.to_str().unwrap(), folder_bc.to_str().unwrap(), "--json"]));
    assert!(j["not_judged"].as_str().unwrap().contains("diagnosis"));
    assert!(j["validation"].as_array().unwrap().iter().all(|r| r["within_noise"].is_null()));
}

#[test]
fn scaffold_picks_a_target_named_like_one_sets_aside_a_split_column_and_follows_a_redirect() {
    use arrow::array::{Int64Array, StringArray};
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // Breast cancer (scikit-learn 1.9.1) with its own split assignment appended as the last
    // column, as some published copies carry it: the split column is neither target nor feature.
    let file = std::fs::File::open(repo_path("tests/data/open/breast_cancer.parquet")).unwrap();
    let reader = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(file).unwrap().build().unwrap();
    let batches: Vec<_> = reader.map(Result::unwrap).collect();
    let table = arrow::compute::concat_batches(&batches[0].schema(), &batches).unwrap();
    let rows = table.num_rows();
    let split: StringArray = (0..rows).map(|r| Some(["train", "train", "train", "valid", "test"][r % 5])).collect();
    let schema = table.schema();
    let mut columns: Vec<(&str, arrow::array::ArrayRef)> =
        schema.fields().iter().map(|f| f.name().as_str()).zip(table.columns().iter().cloned()).collect();
    columns.push(("split", std::sync::Arc::new(split)));
    write_parquet(&d.join("cancer.parquet"), columns);
    let text = stdout(&run_in(d, &["scaffold", "cancer.parquet"]));
    assert!(
        text.contains("target = \"diagnosis\"") && text.contains("chosen because its name says it is what the table predicts"),
        "{text}"
    );
    assert!(text.contains("split") && text.contains("looks like a split assignment (test, train, valid)"), "{text}");
    assert!(text.contains("drop = [\"split\"]"), "{text}");
    assert!(text.contains("# [split.labels] train = [\"train\"], validation = [\"valid\"], test = [\"test\"]"), "{text}");
    // A penguin-like table whose last column is the study year: the species is the target.
    let n = 60;
    write_parquet(
        &d.join("birds.parquet"),
        vec![
            ("species", std::sync::Arc::new((0..n).map(|i| Some(["adelie", "gentoo", "chinstrap"][i % 3])).collect::<StringArray>()) as _),
            ("bill_mm", std::sync::Arc::new((0..n).map(|i| Some(30.0 + (i % 17) as f64)).collect::<arrow::array::Float64Array>()) as _),
            ("year", std::sync::Arc::new(Int64Array::from((0..n).map(|i| 2007 + (i % 3) as i64).collect::<Vec<_>>())) as _),
        ],
    );
    let text = stdout(&run_in(d, &["scaffold", "birds.parquet"]));
    assert!(text.contains("target = \"species\""), "{text}");
    // Printed into a file in another folder, the data path is relative to that file.
    std::fs::create_dir(d.join("experiments")).unwrap();
    let manifest = d.join("experiments/birds.toml");
    let status = common::bin()
        .current_dir(d)
        .args(["scaffold", "birds.parquet"])
        .stdout(std::fs::File::create(&manifest).unwrap())
        .status()
        .unwrap();
    assert!(status.success());
    let text = std::fs::read_to_string(&manifest).unwrap();
    if cfg!(target_os = "linux") {
        assert!(text.contains("path = \"../birds.parquet\"  # relative to this manifest"), "{text}");
        let check = run_in(d, &["check", "experiments/birds.toml"]);
        assert!(check.status.success(), "{}", stderr(&check));
    }
}
