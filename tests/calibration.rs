//! Calibration, prediction intervals and seed ensembles end to end: the stored reliability table
//! recomputes the stored ECE; a fitted map reaches `predict` and the deployed threshold and is
//! re-derived by `verify`; an ensemble's outputs are its members' mean bit for bit; split
//! conformal intervals cover what Lei et al. (2018) promise on scikit-learn's
//! diabetes table (tests/data/open/diabetes.parquet, exported from the scikit-learn 1.9.1 wheel by
//! tests/data/open/export_from_scikit_learn.py).

mod common;

use arrow::array::Float64Array;
use common::*;
use serde_json::Value;
use std::path::{Path, PathBuf};
use tabcard::calibrate::conformal;
use tabcard::rng::{Purpose, Stream};

fn json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// (row, outputs) of a stored predictions CSV.
fn predictions(path: &Path) -> Vec<(usize, Vec<f64>)> {
    std::fs::read_to_string(path)
        .unwrap()
        .lines()
        .skip(1)
        .map(|l| {
            let mut cells = l.split(',');
            let row = cells.next().unwrap().parse().unwrap();
            (row, cells.map(|c| c.parse().unwrap()).collect())
        })
        .collect()
}

/// Every value of the float64 column `name` of a Parquet file.
fn float_column(path: &Path, name: &str) -> Vec<f64> {
    parquet_column(path, name, |a: &Float64Array, i| a.value(i))
}

/// ECE = sum over the table's bins of rows/n x |observed - mean predicted|, from selection.json.
fn assert_ece_recomputes(folder: &Path, what: &str) {
    let selection = json(&folder.join("selection.json"));
    let test = &selection["test"];
    let rows = test["rows"].as_u64().unwrap() as f64;
    let table = test["reliability"].as_array().unwrap();
    assert!(!table.is_empty(), "{what}: every classifier has a reliability table");
    let recomputed: f64 = table
        .iter()
        .map(|b| (b["count"].as_f64().unwrap() / rows) * (b["observed"].as_f64().unwrap() - b["mean_predicted"].as_f64().unwrap()).abs())
        .sum();
    let stored = test["metrics"]["ece"].as_f64().unwrap();
    assert!((recomputed - stored).abs() <= 1e-12, "{what}: ECE from the table {recomputed} vs stored {stored}");
    let counted: u64 = table.iter().map(|b| b["count"].as_u64().unwrap()).sum();
    assert_eq!(counted as f64, rows, "{what}: the bins hold every test row");
    for b in table {
        let (lo, hi) = (b["observed_interval"][0].as_f64().unwrap(), b["observed_interval"][1].as_f64().unwrap());
        assert!(lo <= b["observed"].as_f64().unwrap() && b["observed"].as_f64().unwrap() <= hi, "{what}: Wilson interval holds its share");
    }
}

fn copy_demo(dir: &Path, manifest: &str, data: &str) -> PathBuf {
    std::fs::create_dir_all(dir.join("experiments")).unwrap();
    std::fs::create_dir_all(dir.join("data-demo")).unwrap();
    std::fs::copy(repo_path(&format!("data-demo/{data}")), dir.join("data-demo").join(data)).unwrap();
    let path = dir.join("experiments").join(manifest);
    std::fs::copy(repo_path(&format!("experiments/{manifest}")), &path).unwrap();
    path
}

#[test]
fn the_reliability_table_recomputes_the_stored_ece_on_the_lease_demo_and_on_iris() {
    let dir = tempfile::tempdir().unwrap();
    let lease = trained(dir.path(), &copy_demo(dir.path(), "lease-default.toml", "lease-applications.parquet"));
    assert_ece_recomputes(&lease, "lease demo (binary, temperature-scaled)");
    let card = std::fs::read_to_string(lease.join("card.md")).unwrap();
    assert!(card.contains("## Calibration") && card.contains("temperature scaling"), "the card names the map");
    assert!(card.contains("| ece | "), "before and after, with intervals");

    let iris = tempfile::tempdir().unwrap();
    std::fs::copy(repo_path("tests/data/open/iris.parquet"), iris.path().join("iris.parquet")).unwrap();
    let m = iris.path().join("m.toml");
    std::fs::write(
        &m,
        "[experiment]\nname = \"iris\"\naffects_people = false\n\n[data]\npath = \"iris.parquet\"\ntarget = \"species\"\ntask = \"multiclass\"\n\n[model]\nhidden = [16]\n\n[training]\nepochs = 40\nbatch_size = 32\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 200\n\n[calibration]\nper_class_reliability = true\n\n[sweep]\nseeds = [1, 2]\n",
    )
    .unwrap();
    let folder = trained(iris.path(), &m);
    assert_ece_recomputes(&folder, "iris (multiclass)");
    let selection = json(&folder.join("selection.json"));
    assert_eq!(selection["test"]["reliability_per_class"].as_array().unwrap().len(), 3, "one table per class on request");
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("top-label confidence") && card.contains("95% Wilson interval"), "a multiclass card shows its table");
}

#[test]
fn a_fitted_map_reaches_predict_and_verify_reproduces_it() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let m = small_lease_experiment(d, 3000, "");
    let text = std::fs::read_to_string(&m).unwrap() + "\n[calibration]\nmethod = \"platt\"\n";
    std::fs::write(&m, text).unwrap();
    let folder = trained(d, &m);
    let selection = json(&folder.join("selection.json"));
    assert_eq!(selection["calibration"]["map"]["method"], "platt");
    assert_ece_recomputes(&folder, "small lease, Platt");

    // predict scores every row with the map: on the test rows it gives the stored calibrated
    // probabilities bit for bit.
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "scored.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let scored = std::fs::read_to_string(d.join("scored.csv")).unwrap();
    let header: Vec<&str> = scored.lines().next().unwrap().split(',').collect();
    let p_col = header.iter().position(|h| h.starts_with("p_")).unwrap();
    let rows: Vec<Vec<&str>> = scored.lines().skip(1).map(|l| l.split(',').collect()).collect();
    let stored = predictions(&folder.join("test-predictions.csv"));
    assert!(!stored.is_empty());
    for (row, outputs) in &stored {
        let p: f64 = rows[*row][p_col].parse().unwrap();
        assert_eq!(p.to_bits(), outputs[1].to_bits(), "row {row}: predict's probability is the stored calibrated one");
    }

    let out = run_in(d, &["verify", folder.to_str().unwrap()]);
    assert!(out.status.success(), "verify re-derives the map: {}{}", stdout(&out), stderr(&out));
}

#[test]
fn split_conformal_intervals_cover_as_promised_on_diabetes() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::copy(repo_path("tests/data/open/diabetes.parquet"), d.join("diabetes.parquet")).unwrap();
    let m = d.join("m.toml");
    std::fs::write(
        &m,
        "[experiment]\nname = \"diabetes\"\naffects_people = false\n\n[data]\npath = \"diabetes.parquet\"\ntarget = \"progression\"\ntask = \"regression\"\n\n[split]\nseed = 3\n\n[model]\nhidden = [16]\n\n[training]\nepochs = 100\nbatch_size = 32\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 200\n\n[sweep]\nseeds = [1]\n",
    )
    .unwrap();
    let folder = trained(d, &m);
    let target = float_column(&d.join("diabetes.parquet"), "progression");
    let selection = json(&folder.join("selection.json"));
    let interval = &selection["interval"];
    let run = selection["selected_run"].as_str().unwrap();

    // The stored half-width is numpy's np.sort(r)[k - 1] of the validation residuals, with
    // k = ceil((n + 1) 0.9) (the default coverage).
    let validation = predictions(&folder.join("runs").join(run).join("validation-predictions.csv"));
    let mut residuals: Vec<f64> = validation.iter().map(|(row, o)| (target[*row] - o[0]).abs()).collect();
    residuals.sort_by(f64::total_cmp);
    let n = residuals.len();
    let k = conformal::rank(n, 0.9);
    assert_eq!(interval["k"].as_u64().unwrap() as usize, k);
    assert_eq!(interval["half_width"].as_f64().unwrap(), residuals[k - 1]);

    // predict writes prediction -+ the half-width.
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "diabetes.parquet", "--out", "scored.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let scored = std::fs::read_to_string(d.join("scored.csv")).unwrap();
    let header: Vec<&str> = scored.lines().next().unwrap().split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).unwrap_or_else(|| panic!("no {name} column"));
    let (p, lo, hi) = (col("prediction"), col("interval_lower"), col("interval_upper"));
    let q = interval["half_width"].as_f64().unwrap();
    for line in scored.lines().skip(1) {
        let cells: Vec<f64> = [p, lo, hi].iter().map(|&i| line.split(',').nth(i).unwrap().parse().unwrap()).collect();
        assert_eq!((cells[1], cells[2]), (cells[0] - q, cells[0] + q));
    }

    // One trained model, its held-out residuals (validation and test rows) re-split 200 times
    // at random into calibration and test halves: the mean coverage lies in
    // [1 - a, 1 - a + 1/(n + 1)] (Lei et al. 2018, Theorem 2.2) up to Monte Carlo error.
    let test = predictions(&folder.join("test-predictions.csv"));
    let held_out: Vec<f64> = validation.iter().chain(&test).map(|(row, o)| (target[*row] - o[0]).abs()).collect();
    let (a, resplits) = (0.1, 200);
    let calibration_rows = held_out.len() / 2;
    let coverages: Vec<f64> = (0..resplits)
        .map(|i| {
            let mut order: Vec<usize> = (0..held_out.len()).collect();
            Stream::new(1000 + i, Purpose::Split).shuffle(&mut order);
            let (cal, rest) = order.split_at(calibration_rows);
            let cal_r: Vec<f64> = cal.iter().map(|&j| held_out[j]).collect();
            let h = conformal::half_width(&cal_r, 1.0 - a).unwrap().half_width;
            rest.iter().filter(|&&j| held_out[j] <= h).count() as f64 / rest.len() as f64
        })
        .collect();
    let mean = coverages.iter().sum::<f64>() / resplits as f64;
    let sd = (coverages.iter().map(|c| (c - mean).powi(2)).sum::<f64>() / (resplits - 1) as f64).sqrt();
    let mc = 3.0 * sd / (resplits as f64).sqrt();
    let (low, high) = (1.0 - a, 1.0 - a + 1.0 / (calibration_rows as f64 + 1.0));
    eprintln!(
        "diabetes split conformal: {} held-out rows, n = {calibration_rows} calibration rows, 200 re-splits: mean coverage {mean:.4} (sd {sd:.4}, 3 x Monte Carlo error {mc:.4}); promised [{low:.4}, {high:.4}]",
        held_out.len()
    );
    assert!(mean >= low - mc && mean <= high + mc, "mean coverage {mean} outside [{low}, {high}] +- {mc}");
}

/// The p_ columns (or the prediction) of a `predict` CSV output, per row, in file order.
fn scored_outputs(path: &Path) -> Vec<Vec<f64>> {
    let text = std::fs::read_to_string(path).unwrap();
    let header: Vec<&str> = text.lines().next().unwrap().split(',').collect();
    let cols: Vec<usize> = header.iter().enumerate().filter(|(_, h)| h.starts_with("p_") || **h == "prediction").map(|(i, _)| i).collect();
    text.lines()
        .skip(1)
        .map(|l| {
            let cells: Vec<&str> = l.split(',').collect();
            cols.iter().map(|&i| cells[i].parse().unwrap()).collect()
        })
        .collect()
}

/// Trains `manifest` (with `[selection] ensemble = true`), scores `data` with the folder and with
/// each member run alone, and checks the folder's outputs are the members' mean bit for bit
/// (summed in member order, then divided), on every row and on the stored test predictions.
fn ensemble_is_the_mean_of_its_members(dir: &Path, manifest: &Path, data: &str) {
    let folder = trained(dir, manifest);
    let selection = json(&folder.join("selection.json"));
    let members: Vec<String> =
        selection["ensemble"]["members"].as_array().unwrap().iter().map(|m| m.as_str().unwrap().to_string()).collect();
    assert!(members.len() >= 2);
    let score = |target: &Path, out: &str| {
        let o = run_in(dir, &["predict", target.to_str().unwrap(), data, "--out", out]);
        assert!(o.status.success(), "{}", stderr(&o));
        scored_outputs(&dir.join(out))
    };
    let ensemble = score(&folder, "ensemble.csv");
    let alone: Vec<Vec<Vec<f64>>> =
        members.iter().enumerate().map(|(i, id)| score(&folder.join("runs").join(id), &format!("member-{i}.csv"))).collect();
    for (row, values) in ensemble.iter().enumerate() {
        for (c, v) in values.iter().enumerate() {
            let mean = alone.iter().map(|m| m[row][c]).fold(0.0, |a, b| a + b) / members.len() as f64;
            assert_eq!(v.to_bits(), mean.to_bits(), "row {row}: the ensemble's output is its members' mean");
        }
    }
    // The stored test predictions are the ensemble's (binary: the stored [1 - p, p] hold p last).
    for (row, outputs) in predictions(&folder.join("test-predictions.csv")) {
        assert_eq!(outputs.last().unwrap().to_bits(), ensemble[row].last().unwrap().to_bits(), "test row {row}");
    }
    let out = run_in(dir, &["verify", folder.to_str().unwrap(), "--all"]);
    assert!(out.status.success(), "verify re-derives the ensemble: {}{}", stdout(&out), stderr(&out));
}

#[test]
fn a_seed_ensemble_is_the_mean_of_its_stored_members_on_the_lease_demo_and_diabetes() {
    let dir = tempfile::tempdir().unwrap();
    let m = small_lease_experiment(dir.path(), 3000, "");
    let text = std::fs::read_to_string(&m).unwrap().replace("[selection]\n", "[selection]\nensemble = true\n")
        + "\n[calibration]\nmethod = \"temperature\"\n";
    std::fs::write(&m, text).unwrap();
    ensemble_is_the_mean_of_its_members(dir.path(), &m, "leases.parquet");

    let dir = tempfile::tempdir().unwrap();
    std::fs::copy(repo_path("tests/data/open/diabetes.parquet"), dir.path().join("diabetes.parquet")).unwrap();
    let m = dir.path().join("m.toml");
    std::fs::write(
        &m,
        "[experiment]\nname = \"diabetes\"\naffects_people = false\n\n[data]\npath = \"diabetes.parquet\"\ntarget = \"progression\"\ntask = \"regression\"\n\n[model]\nhidden = [16]\n\n[training]\nepochs = 60\nbatch_size = 32\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 200\nensemble = true\n\n[sweep]\nseeds = [1, 2, 3]\n",
    )
    .unwrap();
    ensemble_is_the_mean_of_its_members(dir.path(), &m, "diabetes.parquet");
}
