//! Metrics against scikit-learn 1.9.1 and numpy 2.4.6 on fixed vectors (values and inputs in
//! tests/reference/metrics_reference.json, made by tests/reference/metrics_reference.py), plus the
//! 20-instance example of Fawcett 2006, "An introduction to ROC analysis", Fig. 3 (instances from
//! memory; its AUC of 0.68 is also the hand count of concordant pairs, 68 of 100).

use serde_json::Value;
use tabcard::metrics::calibration::reliability_bins;
use tabcard::metrics::classification::*;
use tabcard::metrics::registry::{self, classification_metrics as scalar_metrics};
use tabcard::metrics::regression;

fn reference() -> Value {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/metrics_reference.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

fn close(name: &str, actual: Option<f64>, expected: f64) {
    let a = actual.unwrap_or_else(|| panic!("{name}: undefined"));
    assert!((a - expected).abs() <= 1e-12 * expected.abs().max(1.0), "{name}: {a} vs scikit-learn {expected}");
}

#[test]
fn binary_metrics_match_scikit_learn() {
    let r = reference();
    for case in r["binary"].as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let labels: Vec<usize> = case["labels"].as_array().unwrap().iter().map(|x| x.as_u64().unwrap() as usize).collect();
        let p = floats(&case["p_positive"]);
        let probs: Vec<f64> = p.iter().flat_map(|&x| [1.0 - x, x]).collect();
        let e = &case["expected"];
        let m = scalar_metrics(&labels, &probs, 2);
        for key in ["accuracy", "balanced_accuracy", "log_loss", "roc_auc", "average_precision", "brier", "ece"] {
            close(&format!("{name} {key}"), m[key], e[key].as_f64().unwrap());
        }
        let predicted = predicted_classes(&probs, 2);
        let report = per_class(&labels, &predicted, 2);
        assert_eq!(report.len(), 2, "{name}");
        for (c, class) in report.iter().enumerate() {
            close(&format!("{name} precision[{c}]"), Some(class.precision), floats(&e["precision"])[c]);
            close(&format!("{name} recall[{c}]"), Some(class.recall), floats(&e["recall"])[c]);
            close(&format!("{name} f1[{c}]"), Some(class.f1), floats(&e["f1"])[c]);
        }
        let confusion: Vec<Vec<usize>> = serde_json::from_value(e["confusion"].clone()).unwrap();
        assert_eq!(confusion_matrix(&labels, &predicted, 2), confusion, "{name}");
        let is_pos: Vec<bool> = labels.iter().map(|&y| y == 1).collect();
        let bins = reliability_bins(&is_pos, &p, 10);
        let observed: Vec<f64> = bins.iter().map(|b| b.observed).collect();
        let mean_predicted: Vec<f64> = bins.iter().map(|b| b.mean_predicted).collect();
        let (eo, ep) = (floats(&e["reliability_observed"]), floats(&e["reliability_mean_predicted"]));
        assert_eq!(observed.len(), eo.len(), "{name}: reliability bins");
        for i in 0..eo.len() {
            close(&format!("{name} observed[{i}]"), Some(observed[i]), eo[i]);
            close(&format!("{name} mean_predicted[{i}]"), Some(mean_predicted[i]), ep[i]);
        }
    }
}

#[test]
fn fawcett_example_auc_is_the_hand_count() {
    let scores = [0.9, 0.8, 0.7, 0.6, 0.55, 0.54, 0.53, 0.52, 0.51, 0.505, 0.4, 0.39, 0.38, 0.37, 0.36, 0.35, 0.34, 0.33, 0.30, 0.1];
    let classes = "p p n p p p n n p n p n p n n n p n p n";
    let is_pos: Vec<bool> = classes.split(' ').map(|c| c == "p").collect();
    assert!((roc_auc(&is_pos, &scores).unwrap() - 0.68).abs() < 1e-12);
}

#[test]
fn calibration_bins_are_closed_on_the_right_everywhere() {
    // Fawcett's scores sit on bin edges (0.1, 0.3, 0.4 -> 0.6, 0.7, 0.8, 0.9). With bins closed on
    // the right (Guo et al. 2017: I_m = ((m-1)/M, m/M]) the top-label ECE is 0.08175; bins closed
    // on the left would give 0.11375 (both by hand: 20 rows, 10 bins).
    let scores = [0.9, 0.8, 0.7, 0.6, 0.55, 0.54, 0.53, 0.52, 0.51, 0.505, 0.4, 0.39, 0.38, 0.37, 0.36, 0.35, 0.34, 0.33, 0.30, 0.1];
    let classes = "p p n p p p n n p n p n p n n n p n p n";
    let labels: Vec<usize> = classes.split(' ').map(|c| (c == "p") as usize).collect();
    let probs: Vec<f64> = scores.iter().flat_map(|&p| [1.0 - p, p]).collect();
    let ece = scalar_metrics(&labels, &probs, 2)["ece"].unwrap();
    assert!((ece - 0.08175).abs() < 1e-12, "{ece}");
    // The reliability diagram bins the same way: 0.1 sits in the first bin, 0.9 in the ninth.
    let is_pos: Vec<bool> = labels.iter().map(|&y| y == 1).collect();
    let bins = reliability_bins(&is_pos, &scores, 10);
    assert_eq!((bins[0].lower, bins[0].count), (0.0, 1));
    let ninth = bins.iter().find(|b| (b.lower - 0.8).abs() < 1e-12).unwrap();
    assert_eq!(ninth.count, 1, "0.9 belongs to (0.8, 0.9]");
}

#[test]
fn multiclass_metrics_match_scikit_learn() {
    let r = reference();
    let case = &r["multiclass"];
    let labels: Vec<usize> = case["labels"].as_array().unwrap().iter().map(|x| x.as_u64().unwrap() as usize).collect();
    let probs = floats(&case["proba"]);
    let e = &case["expected"];
    let m = scalar_metrics(&labels, &probs, 3);
    for key in ["accuracy", "balanced_accuracy", "log_loss", "roc_auc", "brier", "ece"] {
        close(key, m[key], e[key].as_f64().unwrap());
    }
    let predicted = predicted_classes(&probs, 3);
    let report = per_class(&labels, &predicted, 3);
    assert_eq!(report.len(), 3);
    for (c, class) in report.iter().enumerate() {
        close("precision", Some(class.precision), floats(&e["precision"])[c]);
        close("recall", Some(class.recall), floats(&e["recall"])[c]);
        close("f1", Some(class.f1), floats(&e["f1"])[c]);
    }
    let confusion: Vec<Vec<usize>> = serde_json::from_value(e["confusion"].clone()).unwrap();
    assert_eq!(confusion_matrix(&labels, &predicted, 3), confusion);
}

#[test]
fn regression_metrics_match_scikit_learn() {
    let r = reference();
    let case = &r["regression"];
    let (truth, predicted) = (floats(&case["truth"]), floats(&case["predicted"]));
    let m = registry::regression_metrics(&truth, &predicted);
    for key in ["rmse", "mae", "r2"] {
        close(key, m[key], case["expected"][key].as_f64().unwrap());
    }
}

#[test]
fn edge_cases_have_defined_answers() {
    // A single class present: AUC and average precision undefined, accuracy defined.
    let m = scalar_metrics(&[1, 1, 1], &[0.2, 0.8, 0.3, 0.7, 0.1, 0.9], 2);
    assert_eq!(m["roc_auc"], None);
    assert_eq!(m["accuracy"], Some(1.0));
    // Constant predictions: AUC one half (every pair tied).
    let m = scalar_metrics(&[0, 1, 0, 1], &[0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5, 0.5], 2);
    assert_eq!(m["roc_auc"], Some(0.5));
    // Constant target in R2 (scikit-learn's force_finite convention).
    assert_eq!(regression::r2(&[3.0, 3.0, 3.0], &[3.0, 3.0, 3.0]), Some(1.0));
    assert_eq!(regression::r2(&[3.0, 3.0, 3.0], &[2.0, 3.0, 4.0]), Some(0.0));
}
