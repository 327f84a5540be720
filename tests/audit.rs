//! What auditors and users do after training: `verify` reproduces the selected runs bit for bit
//! and fails with the right message when the data, a weight file or the stored manifest changed;
//! `predict` reproduces the stored validation predictions exactly, checks the schema and counts
//! unseen levels and out-of-range rows; `compare` shows the one changed key; `history` lists it.

mod common;

use arrow::array::{Array, ArrayRef, AsArray, Float64Array, StringArray};
use arrow::datatypes::Float64Type;
use common::*;
use std::path::{Path, PathBuf};
use std::sync::Arc;

fn train(dir: &Path, manifest: &Path) -> PathBuf {
    let out = run_in(dir, &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let line = stdout(&out).lines().find(|l| l.starts_with("results")).unwrap().to_string();
    PathBuf::from(line.trim_start_matches("results").trim())
}

#[test]
fn verify_passes_and_fails_for_the_right_reasons() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2000, "");
    let folder = train(dir.path(), &manifest);
    let folder_arg = dir.path().join(&folder);
    let ok = run_in(dir.path(), &["verify", folder_arg.to_str().unwrap()]);
    assert_eq!(ok.status.code(), Some(0), "{}{}", stdout(&ok), stderr(&ok));
    assert!(stdout(&ok).contains("verdict   verified: every run reproduced bit for bit"), "{}", stdout(&ok));
    assert!(stdout(&ok).contains("identical bits are promised on any CPU"));
    assert_eq!(stdout(&ok).matches(": identical (weights, history, metrics)").count(), 2, "two seeds of the selected configuration");
    let history = run_in(dir.path(), &["history", "--results", "results"]);
    assert!(stdout(&history).contains("small-lease") && stdout(&history).contains("yes: 2 of 4 runs on "), "{}", stdout(&history));

    // (c) the stored manifest edited.
    let edited = dir.path().join("edited");
    copy_dir(&folder_arg, &edited);
    let text = std::fs::read_to_string(edited.join("manifest.json")).unwrap().replace("\"epochs\": 6", "\"epochs\": 7");
    std::fs::write(edited.join("manifest.json"), text).unwrap();
    let out = run_in(dir.path(), &["verify", "edited"]);
    assert_eq!(out.status.code(), Some(6));
    assert!(stderr(&out).starts_with("error: edited/manifest.json: was changed after it was recorded"), "{}", stderr(&out));
    // With the folder's integrity list rewritten to hide it, the recorded manifest SHA-256 catches it.
    tabcard::store::integrity::seal(&edited, |_| Ok(())).unwrap();
    let out = run_in(dir.path(), &["verify", "edited"]);
    assert_eq!(out.status.code(), Some(3));
    assert!(stderr(&out).starts_with("error: edited/manifest.json: was edited after training: its SHA-256 is "), "{}", stderr(&out));

    // (b) a stored weight file altered: one byte of the last tensor flipped.
    let altered = dir.path().join("altered");
    copy_dir(&folder_arg, &altered);
    let selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(altered.join("selection.json")).unwrap()).unwrap();
    let run = selection["selected_run"].as_str().unwrap();
    let weights = altered.join("runs").join(run).join("weights.safetensors");
    let mut bytes = std::fs::read(&weights).unwrap();
    let last = bytes.len() - 1;
    bytes[last] ^= 0x40;
    std::fs::write(&weights, &bytes).unwrap();
    let out = run_in(dir.path(), &["verify", "altered"]);
    assert_eq!(out.status.code(), Some(6));
    assert!(stderr(&out).contains("weights.safetensors: was changed after it was recorded"), "{}", stderr(&out));
    // The folder's list rewritten to hide it: the run's own index catches it.
    tabcard::store::integrity::seal(&altered, |_| Ok(())).unwrap();
    let out = run_in(dir.path(), &["verify", "altered"]);
    assert_eq!(out.status.code(), Some(6));
    let report = stdout(&out);
    assert!(
        report.contains(&format!("{run} seed"))
            && report.contains("CANNOT VERIFY")
            && report.contains("weights.safetensors: fails its integrity check"),
        "{report}"
    );
    assert!(report.contains("verdict   NOT verified"));
    // The same alteration with checksums.json's digest updated to hide it is caught by the tensor digests.
    let index_path = altered.join("runs").join(run).join("checksums.json");
    let mut index: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&index_path).unwrap()).unwrap();
    index["files"]["weights.safetensors"] = serde_json::Value::String(tabcard::fingerprint::sha256_hex(&bytes));
    std::fs::write(&index_path, serde_json::to_string_pretty(&index).unwrap()).unwrap();
    tabcard::store::integrity::seal(&altered, |_| Ok(())).unwrap();
    let out = run_in(dir.path(), &["verify", "altered"]);
    assert_eq!(out.status.code(), Some(6));
    assert!(stdout(&out).contains("does not match its recorded SHA-256 (weights.safetensors was altered)"), "{}", stdout(&out));

    // (a) one byte of the data file changed.
    let data = dir.path().join("leases.parquet");
    let mut bytes = std::fs::read(&data).unwrap();
    bytes[100] ^= 1;
    std::fs::write(&data, &bytes).unwrap();
    let out = run_in(dir.path(), &["verify", folder_arg.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(2));
    let err = stderr(&out);
    let recorded = {
        let e: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(folder_arg.join("experiment.json")).unwrap()).unwrap();
        e["data"]["file_sha256"].as_str().unwrap().to_string()
    };
    let now = tabcard::fingerprint::file_sha256(&data).unwrap();
    assert_eq!(
        err.trim_end(),
        format!("error: {}: has changed since training: its SHA-256 is now {now}, the results record {recorded}", data.display())
    );
}

fn read_parquet(path: &Path) -> tabcard::data::table::Table {
    tabcard::data::parquet::read_table(path).unwrap()
}

#[test]
fn predict_reproduces_validation_predictions_and_checks_its_input() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2000, "");
    let folder = dir.path().join(train(dir.path(), &manifest));
    let out = run_in(dir.path(), &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "scored.parquet"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).contains("scored    2000 rows"), "{}", stdout(&out));
    let scored = read_parquet(&dir.path().join("scored.parquet"));
    let p = scored.column("p_true").unwrap();
    let ids = scored.column("application_id").unwrap();
    assert!(scored.column("decision").is_some() && scored.column("outside_training_range").is_some());
    // Bit-for-bit equality with the probabilities recorded at training time.
    let selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(folder.join("selection.json")).unwrap()).unwrap();
    let csv =
        std::fs::read_to_string(folder.join("runs").join(selection["selected_run"].as_str().unwrap()).join("validation-predictions.csv"))
            .unwrap();
    let mut checked = 0;
    for line in csv.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let row: usize = f[0].parse().unwrap();
        let stored: f64 = f[2].parse().unwrap();
        assert_eq!(p.number(row).unwrap().to_bits(), stored.to_bits(), "row {row}");
        assert!(ids.number(row).is_some());
        checked += 1;
    }
    assert_eq!(checked, 400, "20% of 2000 rows are validation rows");

    // Schema errors: a missing feature, and text where the model was trained on numbers.
    let columns = tabcard::demo::lease_defaults(50, 8);
    let without: Vec<(&str, ArrayRef)> =
        columns.iter().filter(|(n, _)| n != "collateral_cover").map(|(n, a)| (n.as_str(), a.clone())).collect();
    write_parquet(&dir.path().join("missing.parquet"), without);
    let out = run_in(dir.path(), &["predict", folder.to_str().unwrap(), "missing.parquet", "--out", "x.parquet"]);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(
        stderr(&out).trim_end(),
        "error: missing.parquet: column `collateral_cover`: is missing: the model was trained with it (missing: `collateral_cover`)"
    );
    let retyped: Vec<(&str, ArrayRef)> = columns
        .iter()
        .map(|(n, a)| {
            if n == "lease_amount_k" {
                (n.as_str(), Arc::new(StringArray::from(vec!["big"; 50])) as ArrayRef)
            } else {
                (n.as_str(), a.clone())
            }
        })
        .collect();
    write_parquet(&dir.path().join("retyped.parquet"), retyped);
    let out = run_in(dir.path(), &["predict", folder.to_str().unwrap(), "retyped.parquet", "--out", "x.parquet"]);
    assert_eq!(
        stderr(&out).trim_end(),
        "error: retyped.parquet: column `lease_amount_k`: has type Utf8 but the model was trained on a float column"
    );
    assert!(!dir.path().join("x.parquet").exists(), "nothing written on error");

    // Crafted rows: 3 with an unseen equipment type, 2 with an out-of-range business age.
    let crafted: Vec<(&str, ArrayRef)> = columns
        .iter()
        .map(|(n, a)| {
            let a: ArrayRef = match n.as_str() {
                "equipment_type" => {
                    Arc::new(StringArray::from((0..50).map(|i| if i < 3 { "spaceship" } else { "office" }).collect::<Vec<_>>()))
                }
                "business_age_years" => {
                    let base = a.as_primitive::<Float64Type>();
                    Arc::new(Float64Array::from(
                        (0..50)
                            .map(|i| {
                                if i == 10 {
                                    900.0
                                } else if i == 11 {
                                    -5.0
                                } else {
                                    base.value(i).clamp(0.5, 30.0)
                                }
                            })
                            .collect::<Vec<_>>(),
                    ))
                }
                "lease_amount_k" | "annual_revenue_k" | "owner_credit_score" | "collateral_cover" => {
                    let base = a.as_primitive::<Float64Type>();
                    let train = tabcard::data::parquet::read_table(&dir.path().join("leases.parquet")).unwrap();
                    let col = train.column(n).unwrap();
                    let values: Vec<f64> = (0..col.len()).filter_map(|r| col.number(r)).collect();
                    let (lo, hi) =
                        (values.iter().cloned().fold(f64::INFINITY, f64::min), values.iter().cloned().fold(f64::NEG_INFINITY, f64::max));
                    Arc::new(Float64Array::from(
                        (0..50).map(|i| if base.is_null(i) { None } else { Some(base.value(i).clamp(lo, hi)) }).collect::<Vec<_>>(),
                    ))
                }
                _ => a.clone(),
            };
            (n.as_str(), a)
        })
        .collect();
    write_parquet(&dir.path().join("crafted.parquet"), crafted);
    let out = run_in(dir.path(), &["predict", folder.to_str().unwrap(), "crafted.parquet", "--out", "crafted-scored.parquet"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let report = stdout(&out);
    assert!(report.contains("unseen    3 rows of `equipment_type` hold a level unseen in training"), "{report}");
    let flags = read_parquet(&dir.path().join("crafted-scored.parquet"));
    let flagged: Vec<usize> = (0..50).filter(|&r| flags.column("outside_training_range").unwrap().number(r) == Some(1.0)).collect();
    assert!(flagged.contains(&10) && flagged.contains(&11), "{flagged:?}");
    assert!(report.contains(&format!("flagged   {} rows with a number outside the training range", flagged.len())), "{report}");
}

#[test]
fn compare_shows_the_changed_regularizer_and_the_metric_deltas() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2000, "");
    let a = dir.path().join(train(dir.path(), &manifest));
    let text = std::fs::read_to_string(&manifest).unwrap().replace("hidden = [16]", "hidden = [16]\ndropout = 0.2");
    let other = dir.path().join("dropout.toml");
    std::fs::write(&other, text).unwrap();
    let b = dir.path().join(train(dir.path(), &other));
    let out = run_in(dir.path(), &["compare", a.to_str().unwrap(), b.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    let report = stdout(&out);
    let changes: Vec<&str> =
        report.lines().skip_while(|l| !l.starts_with("manifest changes")).skip(1).take_while(|l| !l.is_empty()).collect();
    assert_eq!(changes, vec!["  model.dropout: 0.0 -> 0.2"], "{report}");
    assert!(report.contains("file SHA-256 same") && report.contains("content SHA-256 same"));
    assert!(
        report.lines().any(|l| l.trim_start().starts_with("roc_auc") && (l.contains("within noise") || l.contains("beyond seed noise"))),
        "{report}"
    );
}
