//! Permutation importance on Friedman's benchmark function (Friedman 1991; `make_friedman1` of
//! scikit-learn 1.9.1, tables written by tests/data/open/export_friedman.py from random_state
//! 0, 1 and 2): y depends on x0 to x4 only, so for every table the five informative features must
//! rank first and the five noise features must not be shown to matter.

mod common;

use common::*;
use serde_json::Value;

#[test]
fn friedman_noise_features_are_not_shown_to_matter_and_informative_ones_rank_first() {
    for seed in 0..3 {
        let dir = tempfile::tempdir().unwrap();
        let d = dir.path();
        let file = format!("friedman1_seed{seed}.parquet");
        std::fs::copy(repo_path(&format!("tests/data/open/{file}")), d.join(&file)).unwrap();
        let m = d.join("m.toml");
        std::fs::write(
            &m,
            format!("[experiment]\nname = \"friedman\"\naffects_people = false\n\n[data]\npath = \"{file}\"\ntarget = \"y\"\ntask = \"regression\"\n\n[model]\nhidden = [32, 32]\n\n[training]\nepochs = 150\nbatch_size = 32\nlearning_rate = 0.003\n\n[selection]\nbaseline = false\nbootstrap = 100\n\n[sweep]\nseeds = [1]\n"),
        )
        .unwrap();
        let folder = trained(d, &m);
        let report: Value = serde_json::from_str(&std::fs::read_to_string(folder.join("importance.json")).unwrap()).unwrap();
        let ranked: Vec<(String, bool, f64, f64)> = report["features"]
            .as_array()
            .unwrap()
            .iter()
            .map(|f| {
                (
                    f["feature"].as_str().unwrap().to_string(),
                    f["shown_to_matter"].as_bool().unwrap(),
                    f["loss"]["lower"].as_f64().unwrap(),
                    f["loss"]["upper"].as_f64().unwrap(),
                )
            })
            .collect();
        eprintln!("friedman1 random_state {seed}: {ranked:?}");
        let top: Vec<&str> = ranked[..5].iter().map(|r| r.0.as_str()).collect();
        for informative in ["x0", "x1", "x2", "x3", "x4"] {
            assert!(top.contains(&informative), "seed {seed}: {informative} not in the top five {top:?}");
        }
        for r in &ranked[5..] {
            assert!(!r.1, "seed {seed}: noise feature {} shown to matter [{}, {}]", r.0, r.2, r.3);
        }
        assert!(ranked[..5].iter().all(|r| r.1), "seed {seed}: every informative feature is shown to matter");
    }
}
