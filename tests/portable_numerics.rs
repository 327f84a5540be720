//! The promise "same bits on any CPU", tested on whatever machine runs the suite:
//! - a committed golden file of digests (`tests/golden/portable-v1.json`) that a small fixed
//!   experiment must reproduce at every dispatch level this CPU runs, with one worker or two, and
//!   restricted to one CPU (`taskset`); this is the check that catches drift across machines;
//! - the same experiment trained one run at a time on 1, 2, 3 and 4 threads, with every product
//!   and element-wise pass split across them, reproduces the same digests;
//! - the demo lease sweep trained with each forced dispatch level, and on 1, 3 and 4 threads per
//!   run, gives identical weights, histories and metrics;
//! - no numerics code reads cache sizes or calls another crate's matrix kernels.
//!
//! To regenerate the golden file after a deliberate change of the numerics (which also bumps the
//! kernel version and the tool version): `TABCARD_WRITE_GOLDEN=1 cargo test --release --test
//! portable_numerics`, then say in the commit why the bits moved.

mod common;

use common::*;
use serde_json::Value;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;

use tabcard::nn::dispatch::Level;

const GOLDEN: &str = "tests/golden/portable-v1.json";

/// A small fixed experiment on 1,500 rows of the invented lease table that uses every regularizer
/// the engine has over a grid of four configurations and two seeds: dropout, batch norm, residual
/// blocks, input noise, weight decay, early stopping, gradient clipping.
fn golden_experiment(dir: &Path) -> PathBuf {
    let body = r#"[model]
hidden = [24, 24]
residual = true
input_noise = 0.05

[training]
epochs = 8
batch_size = 50
weight_decay = 0.001
clip_norm = 5.0

[training.early_stopping]
patience = 3

[selection]
bootstrap = 200

[sweep]
seeds = [1, 2]

[sweep.grid]
"model.dropout" = [0.0, 0.2]
"model.batch_norm" = [false, true]
"#;
    lease_experiment(dir, 1500, "golden.toml", "golden-lease", body)
}

/// (run id, folder) of every finished run of the one experiment under `results`, skipping the
/// temporary folders an unfinished run leaves.
fn run_folders(results: &Path) -> Vec<(String, PathBuf)> {
    let folder = experiment_folder(results).expect("an experiment folder");
    std::fs::read_dir(folder.join("runs"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .map(|dir| (dir.file_name().unwrap().to_string_lossy().into_owned(), dir))
        .filter(|(name, _)| !name.starts_with('.'))
        .collect()
}

/// Per run id, the SHA-256 of every file the run stores except its environment record (which
/// names the dispatch level and CPU) and timing; plus the experiment's selection.
fn digests(results: &Path) -> BTreeMap<String, BTreeMap<String, String>> {
    let mut out = BTreeMap::new();
    for (name, dir) in run_folders(results) {
        let index: Value = serde_json::from_slice(&std::fs::read(dir.join("checksums.json")).unwrap()).unwrap();
        let files = index["files"].as_object().unwrap();
        let kept = files
            .iter()
            .filter(|(file, _)| file.as_str() != "environment.json")
            .map(|(file, sha)| (file.clone(), sha.as_str().unwrap().to_string()))
            .collect();
        out.insert(name, kept);
    }
    let selection = std::fs::read(experiment_folder(results).unwrap().join("selection.json")).unwrap();
    out.insert("(experiment)".into(), BTreeMap::from([("selection.json".to_string(), tabcard::fingerprint::sha256_hex(&selection))]));
    out
}

/// The dispatch level each run of a results folder recorded.
fn recorded_levels(results: &Path) -> Vec<String> {
    let mut levels: Vec<String> = run_folders(results)
        .into_iter()
        .map(|(_, dir)| {
            let env: Value = serde_json::from_slice(&std::fs::read(dir.join("environment.json")).unwrap()).unwrap();
            env["kernel_level"].as_str().unwrap().to_string()
        })
        .collect();
    levels.dedup();
    levels
}

fn train(mut command: Command, dir: &Path, manifest: &Path, results: &str, jobs: &str, level: Level) -> PathBuf {
    let out = command
        .current_dir(dir)
        .args(["train", manifest.to_str().unwrap(), "--results", results, "--jobs", jobs])
        .env("TABCARD_KERNEL", level.name())
        .output()
        .unwrap();
    assert!(out.status.success(), "train at level {} failed: {}\n{}", level.name(), stdout(&out), stderr(&out));
    let path = dir.join(results);
    assert_eq!(recorded_levels(&path), vec![level.name().to_string()], "every run records the level it ran at");
    path
}

/// `tabcard` training one run at a time on all the threads `--jobs` asks for (even beyond this
/// machine's cores), with every product and element-wise pass split into pieces however small.
fn split_small() -> Command {
    let mut command = bin();
    command
        .env(tabcard::threads::OVERSUBSCRIBE_ENV, "1")
        .env(tabcard::threads::ONE_RUN_AT_A_TIME_ENV, "1")
        .env(tabcard::nn::spread::SPLIT_SMALL_ENV, "1");
    command
}

/// How many threads computed pieces of each run, from the runs' timing records.
fn threads_taken(results: &Path) -> Vec<usize> {
    run_folders(results)
        .iter()
        .map(|(_, dir)| {
            let timing: Value = serde_json::from_slice(&std::fs::read(dir.join("timing.json")).unwrap()).unwrap();
            timing["threads"].as_u64().expect("a run's timing records its threads") as usize
        })
        .collect()
}

/// `tabcard` restricted to CPU 0 when `taskset` exists (util-linux), else plain.
fn on_one_cpu() -> (Command, bool) {
    let bin = env!("CARGO_BIN_EXE_tabcard");
    if Command::new("taskset").args(["-c", "0", "true"]).status().is_ok_and(|s| s.success()) {
        let mut c = Command::new("taskset");
        c.args(["-c", "0", bin]);
        (c, true)
    } else {
        (Command::new(bin), false)
    }
}

fn first_difference(want: &BTreeMap<String, BTreeMap<String, String>>, got: &BTreeMap<String, BTreeMap<String, String>>) -> Option<String> {
    if want.keys().ne(got.keys()) {
        return Some(format!("run ids differ: golden {:?}, now {:?}", want.keys().collect::<Vec<_>>(), got.keys().collect::<Vec<_>>()));
    }
    for (run, files) in want {
        for (file, sha) in files {
            let now = got[run].get(file).map(String::as_str).unwrap_or("(absent)");
            if now != sha {
                return Some(format!("run {run} file {file}: golden {sha}, now {now}"));
            }
        }
        if got[run].len() != files.len() {
            return Some(format!(
                "run {run} stores other files: golden {:?}, now {:?}",
                files.keys().collect::<Vec<_>>(),
                got[run].keys().collect::<Vec<_>>()
            ));
        }
    }
    None
}

/// Held by the tests that train here, so that none competes for the cores while another checks
/// that its runs' work went to more than one thread (an idle thread must be free to take a piece).
static TRAINING_ALONE: std::sync::Mutex<()> = std::sync::Mutex::new(());

fn training_alone() -> std::sync::MutexGuard<'static, ()> {
    TRAINING_ALONE.lock().unwrap_or_else(|poisoned| poisoned.into_inner())
}

#[test]
fn the_golden_experiment_reproduces_at_every_level_worker_count_and_cpu_restriction() {
    let _alone = training_alone();
    let dir = tempfile::tempdir().unwrap();
    let manifest = golden_experiment(dir.path());
    let levels = Level::available_levels();
    let best = *levels.last().unwrap();

    // The fastest level with two workers, and the scalar level on one CPU with one worker.
    let fast = digests(&train(bin(), dir.path(), &manifest, "fast", "2", best));
    let (one_cpu, restricted) = on_one_cpu();
    let scalar = digests(&train(one_cpu, dir.path(), &manifest, "scalar-one-cpu", "1", Level::Scalar));
    if !restricted {
        eprintln!("note: taskset is not installed; the scalar run was not restricted to one CPU");
    }
    assert_eq!(first_difference(&fast, &scalar), None, "level {} with 2 workers vs scalar on one CPU", best.name());
    for &level in &levels[1..levels.len() - 1] {
        let other = digests(&train(bin(), dir.path(), &manifest, level.name(), "2", level));
        assert_eq!(first_difference(&fast, &other), None, "level {} vs level {}", best.name(), level.name());
    }
    // 4 configurations x 2 seeds + the linear baseline x 2 seeds.
    assert_eq!(fast.len(), 10 + 1);
    // One run at a time on 1, 2, 3 and 4 threads (more than this machine may have cores), every
    // product and pass split however small: the same digests, and the runs' work did go to more
    // than one thread.
    for threads in 1..=4usize {
        let results = format!("threads-{threads}");
        let path = train(split_small(), dir.path(), &manifest, &results, &threads.to_string(), best);
        assert_eq!(first_difference(&fast, &digests(&path)), None, "{threads} threads per run vs 2 workers");
        let taken = threads_taken(&path);
        assert!(taken.iter().all(|&t| (1..=threads).contains(&t)), "{threads} threads per run: took part {taken:?}");
        if threads > 1 {
            assert!(taken.iter().any(|&t| t > 1), "{threads} threads per run: no run's work was split ({taken:?})");
        }
        eprintln!("{threads} threads per run: threads that took part, by run: {taken:?}");
    }

    let golden_path = repo_path(GOLDEN);
    if std::env::var_os("TABCARD_WRITE_GOLDEN").is_some() {
        let mut golden: Value =
            std::fs::read(&golden_path).ok().and_then(|b| serde_json::from_slice(&b).ok()).unwrap_or_else(|| serde_json::json!({}));
        golden["tool_version"] = env!("CARGO_PKG_VERSION").into();
        golden["kernel_version"] = tabcard::numerics::KERNEL_VERSION.into();
        golden["digests"] = serde_json::to_value(&fast).unwrap();
        std::fs::write(&golden_path, serde_json::to_string_pretty(&golden).unwrap() + "\n").unwrap();
        eprintln!("wrote {}", golden_path.display());
        return;
    }
    let golden: Value = serde_json::from_slice(&std::fs::read(&golden_path).expect("the golden file is committed")).unwrap();
    assert_eq!(
        golden["tool_version"],
        env!("CARGO_PKG_VERSION"),
        "{GOLDEN} is for another tabcard version: regenerate it deliberately (see the top of this file)"
    );
    assert_eq!(golden["kernel_version"], tabcard::numerics::KERNEL_VERSION);
    let want: BTreeMap<String, BTreeMap<String, String>> = serde_json::from_value(golden["digests"].clone()).unwrap();
    if let Some(d) = first_difference(&want, &fast) {
        panic!("this machine does not reproduce {GOLDEN}: {d}\nCPU features: {:?}", tabcard::numerics::current().unwrap().cpu_features);
    }
}

/// (weights digest, history, metrics) of every run, by run id.
type RunContents = BTreeMap<String, (String, String, String)>;

/// The stored history, metrics and weight digests of every run, by run id.
fn run_contents(results: &Path) -> RunContents {
    let mut out = BTreeMap::new();
    for (name, dir) in run_folders(results) {
        let read = |f: &str| std::fs::read_to_string(dir.join(f)).unwrap_or_default();
        let metrics: Value = serde_json::from_str(&read("result.json")).unwrap();
        out.insert(name, (metrics["weights_sha256"].to_string(), read("history.csv"), read("result.json")));
    }
    out
}

/// Trains the demo `manifest` in each case and checks every run's weights, history and metrics
/// are identical across the cases.
fn demo_is_identical_across(manifest: &Path, cases: Vec<(String, Command, &str, Level)>) {
    let dir = tempfile::tempdir().unwrap();
    let mut reference: Option<(String, RunContents)> = None;
    for (case, command, jobs, level) in cases {
        let results = train(command, dir.path(), manifest, &case.replace(' ', "-"), jobs, level);
        let contents = run_contents(&results);
        assert!(contents.len() >= 6, "the demo sweep trains its whole grid ({} runs)", contents.len());
        match &reference {
            None => reference = Some((case, contents)),
            Some((first, want)) => {
                assert_eq!(want.keys().collect::<Vec<_>>(), contents.keys().collect::<Vec<_>>());
                for (run, (weights, history, metrics)) in want {
                    let got = &contents[run];
                    assert_eq!(weights, &got.0, "run {run}: weights at {first} vs {case}");
                    assert_eq!(history, &got.1, "run {run}: history at {first} vs {case}");
                    assert_eq!(metrics, &got.2, "run {run}: metrics at {first} vs {case}");
                }
            }
        }
    }
}

/// The fastest level, one run at a time on each of `threads` with every product split.
fn thread_cases(threads: &[&'static str]) -> Vec<(String, Command, &'static str, Level)> {
    let best = Level::best();
    threads.iter().map(|&t| (format!("{} on {t} threads", best.name()), split_small(), t, best)).collect()
}

#[test]
fn the_demo_lease_sweep_is_identical_at_every_forced_dispatch_level_and_thread_count() {
    let _alone = training_alone();
    // Every level with 2 workers, then the fastest level on 1, 3 and 4 threads per run.
    let mut cases: Vec<(String, Command, &str, Level)> =
        Level::available_levels().into_iter().rev().map(|l| (l.name().to_string(), bin(), "2", l)).collect();
    cases.extend(thread_cases(&["1", "3", "4"]));
    demo_is_identical_across(&repo_path("experiments/lease-default.toml"), cases);
}

#[test]
fn the_demo_greenhouse_sweep_is_identical_at_every_thread_count() {
    let _alone = training_alone();
    demo_is_identical_across(&repo_path("experiments/greenhouse-yield.toml"), thread_cases(&["1", "2", "3", "4"]));
}

#[test]
fn an_unusable_forced_level_is_a_clear_error() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 300, "");
    // A level this CPU cannot run: NEON on x86-64, AVX2 on aarch64.
    let foreign = Level::ALL.into_iter().find(|l| !l.available()).expect("some level is foreign to this CPU");
    for (value, expected) in [("sse9", "is not a dispatch level"), (foreign.name(), "this CPU cannot run that level")] {
        let out = bin()
            .current_dir(dir.path())
            .args(["train", manifest.to_str().unwrap(), "--results", "r"])
            .env("TABCARD_KERNEL", value)
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
        assert!(stderr(&out).contains(expected) && stderr(&out).contains("TABCARD_KERNEL"), "{}", stderr(&out));
        assert!(experiment_folder(&dir.path().join("r")).is_none(), "nothing is written before the error");
    }
}

/// Every Rust source file under `pipeline/`, with its text.
fn sources() -> Vec<(PathBuf, String)> {
    fn walk(dir: &Path, out: &mut Vec<(PathBuf, String)>) {
        for entry in std::fs::read_dir(dir).unwrap() {
            let path = entry.unwrap().path();
            if path.is_dir() {
                walk(&path, out);
            } else if path.extension().is_some_and(|e| e == "rs") {
                let text = std::fs::read_to_string(&path).unwrap();
                out.push((path, text));
            }
        }
    }
    let mut out = Vec::new();
    walk(&repo_path("pipeline"), &mut out);
    out
}

#[test]
fn no_numerics_code_reads_cache_sizes_or_calls_other_matrix_kernels() {
    let sources = sources();
    assert!(sources.len() > 20);
    for (path, text) in &sources {
        for forbidden in ["/sys/devices/system/cpu", "cache/index", "gemm::", "sysconf", "_SC_LEVEL1_DCACHE", "cpuid"] {
            assert!(!text.contains(forbidden), "{} mentions `{forbidden}`", path.display());
        }
    }
    let manifest = std::fs::read_to_string(repo_path("Cargo.toml")).unwrap();
    let dependencies = &manifest[manifest.find("[dependencies]").unwrap()..manifest.find("[dev-dependencies]").unwrap()];
    assert!(!dependencies.contains("gemm"), "the library must not depend on the gemm crate");
}
