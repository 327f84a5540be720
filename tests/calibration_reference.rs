//! Calibration maps and conformal intervals against scipy 1.17.1, scikit-learn 1.9.1 and numpy
//! 2.4.6 (values and inputs in tests/reference/calibration_reference.json, made by
//! tests/reference/calibration_reference.py):
//! - temperature scaling equals `scipy.optimize.minimize_scalar` (bounded) on the float64
//!   validation log loss within 1e-6;
//! - Platt scaling equals a scipy `minimize` (trust-exact) fit of the same smoothed-target
//!   objective within 1e-8;
//! - isotonic outputs equal `sklearn.isotonic.IsotonicRegression(out_of_bounds="clip")` within
//!   1e-12, ties included;
//! - the split conformal half-width equals numpy's `np.sort(r)[k - 1]` with the integer k, and
//!   is refused where k > n.

use serde_json::Value;
use tabcard::calibrate::{conformal, isotonic::Isotonic, platt, temperature};

fn reference() -> Value {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/calibration_reference.json")).unwrap();
    serde_json::from_str(&text).unwrap()
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

fn labels(v: &Value) -> Vec<usize> {
    v.as_array().unwrap().iter().map(|x| x.as_u64().unwrap() as usize).collect()
}

#[test]
fn temperature_equals_scipy_minimize_scalar() {
    for case in reference()["temperature"].as_array().unwrap() {
        let classes = case["classes"].as_u64().unwrap() as usize;
        let fit = temperature::fit(&floats(&case["logits"]), &labels(&case["labels"]), classes);
        let expected = case["expected_temperature"].as_f64().unwrap();
        assert!(!fit.at_bound);
        assert!((fit.temperature - expected).abs() <= 1e-6, "{}: {} vs scipy {expected}", case["name"], fit.temperature);
    }
}

#[test]
fn platt_equals_a_scipy_fit_of_the_smoothed_target_objective() {
    for case in reference()["platt"].as_array().unwrap() {
        let (a, b) = platt::fit(&floats(&case["logits"]), &labels(&case["labels"]));
        let (ea, eb) = (case["expected_a"].as_f64().unwrap(), case["expected_b"].as_f64().unwrap());
        assert!((a - ea).abs() <= 1e-8 && (b - eb).abs() <= 1e-8, "{}: ({a}, {b}) vs scipy ({ea}, {eb})", case["name"]);
    }
}

#[test]
fn isotonic_equals_scikit_learn_ties_included() {
    for case in reference()["isotonic"].as_array().unwrap() {
        let targets: Vec<f64> = labels(&case["labels"]).iter().map(|&y| y as f64).collect();
        let fit = Isotonic::fit(&floats(&case["logits"]), &targets);
        for (q, e) in floats(&case["query"]).iter().zip(floats(&case["expected"])) {
            let p = fit.predict(*q);
            assert!((p - e).abs() <= 1e-12, "{} at {q}: {p} vs scikit-learn {e}", case["name"]);
        }
    }
}

#[test]
fn conformal_half_width_equals_numpy_sort_at_k() {
    for case in reference()["conformal"].as_array().unwrap() {
        let coverage = 1.0 - case["alpha"].as_f64().unwrap();
        let residuals = floats(&case["residuals"]);
        let k = case["k"].as_u64().unwrap() as usize;
        assert_eq!(conformal::rank(residuals.len(), coverage), k, "{}", case["name"]);
        match case["expected_half_width"].as_f64() {
            Some(expected) => {
                let h = conformal::half_width(&residuals, coverage).unwrap();
                assert_eq!(h.half_width, expected, "{}", case["name"]);
            }
            None => assert!(conformal::half_width(&residuals, coverage).is_err(), "{}: k > n must be refused", case["name"]),
        }
    }
}
