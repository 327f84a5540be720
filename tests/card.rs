//! The model card: every section present with real figures once rendered by a CommonMark renderer
//! (pulldown-cmark), SVG figures that parse as XML and hold the plotted series, byte-identical
//! re-rendering with `tabcard card`, user templates, and hostile text rendered harmlessly.

mod common;

use arrow::array::{ArrayRef, BooleanArray, Float64Array, StringArray};
use common::*;
use std::sync::Arc;

fn html(markdown: &str) -> String {
    let mut out = String::new();
    pulldown_cmark::html::push_html(&mut out, pulldown_cmark::Parser::new_ext(markdown, pulldown_cmark::Options::ENABLE_TABLES));
    out
}

#[test]
fn the_card_has_every_section_figures_and_is_reproducible() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 2500, "[sweep.grid]\n\"model.dropout\" = [0.0, 0.1, 0.3]\n");
    let folder = trained(dir.path(), &manifest);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    let page = html(&card);
    for heading in [
        "At a glance",
        "Purpose and ownership",
        "Cautions for decisions about people",
        "Data",
        "Capacity and regularization",
        "Validation results",
        "Test results",
        "Known limitations",
        "Provenance and reproduction",
        "Review and sign-off",
    ] {
        assert!(page.contains(&format!("<h2>{heading}")), "missing section {heading}");
    }
    for needle in [
        "linear baseline",
        "weight decay (decoupled)",
        "dropout",
        "early stopping",
        "parameters",
        "95% bootstrap interval",
        "Fairness across groups of people has not been assessed",
        "<table>",
        "Confusion matrix",
        "Preprocessing",
        "Youden",
        "Reliability",
    ] {
        assert!(page.contains(needle), "card lacks {needle}");
    }
    let figures = ["learning-curves.svg", "grid-model-dropout.svg", "reliability.svg"];
    let selection: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("selection.json")).unwrap()).unwrap();
    let selected_config = selection["selected_config"].clone();
    for f in figures {
        assert!(page.contains(&format!("src=\"figures/{f}\"")), "card does not show {f}");
        let svg = std::fs::read_to_string(folder.join("figures").join(f)).unwrap();
        let doc = roxmltree::Document::parse(&svg).unwrap_or_else(|e| panic!("{f} is not XML: {e}"));
        let series: Vec<&str> =
            doc.descendants().filter(|n| n.attribute("class") == Some("series")).filter_map(|n| n.attribute("data-series")).collect();
        assert!(!series.is_empty(), "{f} has no series");
        let points = doc
            .descendants()
            .filter(|n| n.attribute("class") == Some("series"))
            .filter_map(|n| n.attribute("points"))
            .map(|p| p.split(' ').count())
            .max()
            .unwrap();
        assert!(points >= 2, "{f}: a series with {points} points");
        if f == "learning-curves.svg" {
            assert!(series.contains(&"seed 1 train") && series.contains(&"seed 2 validation"), "{series:?}");
            // Each seed's kept epoch is marked, at the epoch its run record names.
            for seed in [1, 2] {
                let kept =
                    series.iter().find(|s| s.starts_with(&format!("seed {seed}: kept epoch "))).unwrap_or_else(|| panic!("{series:?}"));
                let epoch: usize = kept.split("kept epoch ").nth(1).unwrap().split(',').next().unwrap().parse().unwrap();
                let recorded = std::fs::read_dir(folder.join("runs"))
                    .unwrap()
                    .map(|e| {
                        serde_json::from_slice::<serde_json::Value>(&std::fs::read(e.unwrap().path().join("result.json")).unwrap()).unwrap()
                    })
                    .find(|r| r["seed"] == seed && r["config_id"] == selected_config)
                    .unwrap();
                assert_eq!(recorded["best_epoch"], epoch, "seed {seed}");
            }
        }
        if f == "grid-model-dropout.svg" {
            assert!(series.contains(&"selected configuration") && series.contains(&"linear baseline, validation"), "{series:?}");
        }
    }

    let before: Vec<(String, Vec<u8>)> = ["card.md", "figures/learning-curves.svg", "figures/reliability.svg"]
        .iter()
        .map(|f| (f.to_string(), std::fs::read(folder.join(f)).unwrap()))
        .collect();
    let out = run_in(dir.path(), &["card", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    for (f, bytes) in before {
        assert!(std::fs::read(folder.join(&f)).unwrap() == bytes, "{f} changed when re-rendered");
    }

    let templates = dir.path().join("templates");
    std::fs::create_dir(&templates).unwrap();
    std::fs::write(templates.join("card.md.tera"), "# Our own layout for {{ about.name }}\n{{ results.headline }}\n").unwrap();
    let out = run_in(dir.path(), &["card", folder.to_str().unwrap(), "--templates", templates.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    let custom = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(custom.starts_with("# Our own layout for small-lease\ntest roc_auc "), "{custom}");
}

#[test]
fn hostile_names_and_levels_render_harmlessly() {
    let dir = tempfile::tempdir().unwrap();
    let n = 600;
    let evil_column = "[click me](http://evil.example) <img src=x onerror=alert(1)>|\n# Approved by compliance";
    let evil_level = "<script>alert(1)</script> **bold** ![x](y)\u{202e}";
    let columns: Vec<(&str, ArrayRef)> = vec![
        (evil_column, Arc::new(Float64Array::from((0..n).map(|i| (i % 17) as f64).collect::<Vec<_>>())) as ArrayRef),
        ("kind", Arc::new(StringArray::from((0..n).map(|i| if i % 3 == 0 { evil_level } else { "plain" }).collect::<Vec<_>>()))),
        ("y", Arc::new(BooleanArray::from((0..n).map(|i| (i % 17) > 8 || i % 5 == 0).collect::<Vec<_>>()))),
    ];
    write_parquet(&dir.path().join("data.parquet"), columns);
    let text = manifest("\n[experiment.x]\n")
        .replace("\n[experiment.x]\n", "")
        .replace("name = \"test\"", "name = \"test\"\ndescription = \"<b>trusted</b> [link](http://x)\\n## Fake section\"")
        + "\n[model]\nhidden = [4]\n\n[training]\nepochs = 3\n\n[sweep]\nseeds = [1]\n\n[selection]\nbootstrap = 50\n";
    std::fs::write(dir.path().join("m.toml"), text).unwrap();
    let check = run_in(dir.path(), &["check", "m.toml"]);
    assert!(check.status.success(), "{}", stderr(&check));
    assert!(!stdout(&check).contains('\u{202e}') && !stdout(&check).contains("\n# Approved"), "terminal output carries control text");
    let folder = trained(dir.path(), &dir.path().join("m.toml"));
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    let page = html(&card);
    for bad in ["<script", "<img src=x", "<b>", "href=\"http://evil", "href=\"http://x", "<h1>Approved", "<h2>Fake", "\u{202e}"] {
        assert!(!page.contains(bad), "rendered card contains {bad:?}");
    }
    assert!(!card.lines().any(|l| l.starts_with("# Approved") || l.starts_with("## Fake")), "injected a heading");
    assert!(page.contains("click me"), "the column name must still be shown, as text");
}
