//! Limitation rules about the evaluation: a small test split, poor calibration, no better than
//! chance, the network against its linear baseline (on the selection metric, and on every other
//! card metric), and classes the deployed decision never gives.

use super::finding::*;
use crate::card::evidence::Evidence;
use crate::format::sig;

/// The network's validation mean against the linear baseline's, with the noise both share.
struct BaselineComparison {
    /// How much better the network is (negative: worse), in the metric's units.
    advantage: f64,
    /// Twice the combined seed standard deviation.
    noise: f64,
}

/// Whether the network's validation mean beats the baseline's, and by more than the noise.
fn baseline_comparison(e: &Evidence) -> Option<BaselineComparison> {
    let (net_mean, net_sd) = e.selected?;
    let (base_mean, base_sd) = e.baseline?;
    let noise = 2.0 * (net_sd * net_sd + base_sd * base_sd).sqrt();
    let advantage = if e.higher_is_better { net_mean - base_mean } else { base_mean - net_mean };
    Some(BaselineComparison { advantage, noise })
}

const BASELINE_THRESHOLD: &str =
    "the network ahead of the linear baseline by more than twice the combined seed standard deviation (common practice)";

pub(super) fn small_test_split(e: &Evidence) -> Option<Limitation> {
    let mut findings = Vec::new();
    let threshold = if e.classification {
        if let Some((label, rows)) = &e.test_smallest_class {
            if *rows < MIN_TEST_ROWS_PER_CLASS {
                findings.push(format!("the test split of {} rows holds {rows} rows of class \"{label}\"", e.test_rows));
            }
        }
        format!("at least {MIN_TEST_ROWS_PER_CLASS} test rows of every class (common practice)")
    } else {
        if e.test_rows < MIN_TEST_ROWS_REGRESSION {
            findings.push(format!("the test split holds {} rows", e.test_rows));
        }
        format!("at least {MIN_TEST_ROWS_REGRESSION} test rows (common practice)")
    };
    if !e.degenerate_intervals.is_empty() {
        findings.push(format!(
            "the 95% bootstrap intervals of {} have zero width: every resample gave the same value, which shows too few rows rather than certainty",
            e.degenerate_intervals.join(", ")
        ));
    }
    (!findings.is_empty()).then(|| {
        Limitation::new(
            "small_test_split",
            "The test split is too small to judge the model",
            findings.join("; "),
            format!("{threshold}, and bootstrap intervals of non-zero width"),
        )
    })
}

/// Judged by the interval, like the other rules: a small test split's ECE is noisy (and biased
/// upward), so it fires only when even the interval's lower bound exceeds the limit.
pub(super) fn poor_calibration(e: &Evidence) -> Option<Limitation> {
    let ece = e.test_ece?;
    let judged = e.test_ece_lower.unwrap_or(ece);
    (judged > ECE_LIMIT).then(|| Limitation::new(
        "poor_calibration",
        "Probabilities are poorly calibrated",
        format!(
            "expected calibration error on the test split is {}{} (10 equal-width bins, right-closed, on top-label confidence; Guo et al. 2017)",
            sig(ece, 3),
            e.test_ece_lower.map_or(String::new(), |l| format!(", at least {} by its 95% bootstrap interval", sig(l, 3)))
        ),
        format!("at most {ECE_LIMIT}, judged by the interval's lower bound (common practice)"),
    ))
}

/// The prediction interval covers fewer test targets than declared, beyond what the test
/// split's size explains: the declared coverage lies above the Wilson interval of the observed.
pub(super) fn interval_undercoverage(e: &Evidence) -> Option<Limitation> {
    let (declared, observed, upper, covered, rows) = e.interval_coverage?;
    (declared > upper).then(|| {
        Limitation::new(
            "interval_undercoverage",
            "Prediction intervals cover less than declared",
            format!(
                "the {}% interval covered {covered} of {rows} test targets ({}%; at most {}% by the 95% Wilson interval): the test rows \
                 are not exchangeable with the validation rows it was fitted on (a drift, a time or group split), so its width is too narrow",
                sig(100.0 * declared, 4),
                sig(100.0 * observed, 4),
                sig(100.0 * upper, 4)
            ),
            "the declared coverage inside the 95% Wilson interval of the test coverage (split conformal guarantee, Lei et al. 2018)".into(),
        )
    })
}

pub(super) fn no_better_than_chance(e: &Evidence) -> Option<Limitation> {
    let (name, value, lower, upper, chance) = e.chance.as_ref()?;
    (*lower <= *chance).then(|| {
        Limitation::new(
            "no_better_than_chance",
            "The model is not shown to beat chance",
            format!(
                "test {name} {} with 95% bootstrap interval [{}, {}], which reaches {} (what a model with no information scores)",
                sig(*value, 4),
                sig(*lower, 4),
                sig(*upper, 4),
                sig(*chance, 2)
            ),
            format!("the interval's lower end above {} (ROC AUC 0.5: Hanley and McNeil 1982; R² 0: predicting the mean)", sig(*chance, 2)),
        )
        .serious()
    })
}

pub(super) fn baseline_within_noise(e: &Evidence) -> Option<Limitation> {
    let BaselineComparison { advantage, noise } = baseline_comparison(e)?;
    let (net_mean, net_sd) = e.selected?;
    let (base_mean, base_sd) = e.baseline?;
    (advantage.abs() <= noise).then(|| {
        Limitation::new(
            "baseline_within_noise",
            "The network does not clearly beat the linear baseline",
            format!(
                "validation {}: network {} ± {}, linear baseline {} ± {}; the simpler linear model does as well within seed noise",
                e.metric,
                sig(net_mean, 4),
                sig(net_sd, 2),
                sig(base_mean, 4),
                sig(base_sd, 2)
            ),
            BASELINE_THRESHOLD.into(),
        )
    })
}

pub(super) fn baseline_beats_network(e: &Evidence) -> Option<Limitation> {
    let BaselineComparison { advantage, noise } = baseline_comparison(e)?;
    let (net_mean, net_sd) = e.selected?;
    let (base_mean, base_sd) = e.baseline?;
    (advantage < -noise).then(|| {
        Limitation::new(
            "baseline_beats_network",
            "The linear baseline beats the network",
            format!(
                "validation {}: linear baseline {} ± {}, network {} ± {}; prefer the linear baseline, or revisit the network's settings",
                e.metric,
                sig(base_mean, 4),
                sig(base_sd, 2),
                sig(net_mean, 4),
                sig(net_sd, 2)
            ),
            BASELINE_THRESHOLD.into(),
        )
        .serious()
    })
}

const OTHER_METRICS_THRESHOLD: &str = "the linear baseline ahead of the network on another card metric by more than twice the combined seed standard deviation of its validation means (common practice); when metrics disagree the selection metric decides what is deployed, so the reviewer should judge whether the metrics the baseline wins matter more for this decision";

/// The selection metric may favour the network while another card metric favours the baseline
/// beyond seed noise (a probability-quality metric such as log loss against a decision metric
/// such as balanced accuracy): the card says so and which model each metric prefers.
pub(super) fn baseline_better_on_other_metrics(e: &Evidence) -> Option<Limitation> {
    // When the selection metric already prefers the baseline, `baseline_beats_network` says so.
    if baseline_comparison(e).is_some_and(|c| c.advantage < -c.noise) {
        return None;
    }
    let wins: Vec<String> = e
        .baseline_other_metrics
        .iter()
        .filter(|p| {
            let ((nm, ns), (bm, bs)) = (p.network, p.baseline);
            let advantage = if p.higher_is_better { bm - nm } else { nm - bm };
            advantage > 2.0 * (ns * ns + bs * bs).sqrt()
        })
        .map(|p| {
            let ((nm, ns), (bm, bs)) = (p.network, p.baseline);
            format!("{}: linear baseline {} ± {}, network {} ± {}", p.metric, sig(bm, 4), sig(bs, 2), sig(nm, 4), sig(ns, 2))
        })
        .collect();
    if wins.is_empty() {
        return None;
    }
    let on_selection = match baseline_comparison(e) {
        Some(c) if c.advantage > c.noise => "ahead of the baseline beyond seed noise",
        Some(_) => "level with the baseline within seed noise",
        None => "compared without the baseline",
    };
    Some(Limitation::new(
        "baseline_better_on_other_metrics",
        "The linear baseline wins on other metrics",
        format!(
            "validation {}; the network was selected on {}, on which it is {on_selection}: prefer the network if {} is what the decision needs, the baseline if the metrics it wins matter more",
            wins.join("; "),
            e.metric,
            e.metric
        ),
        OTHER_METRICS_THRESHOLD.into(),
    ))
}

/// A classifier whose deployed decision never gives some class on the test split, though the
/// class has test rows: for those rows the model cannot be right.
pub(super) fn class_never_predicted(e: &Evidence) -> Option<Limitation> {
    if e.never_predicted.is_empty() {
        return None;
    }
    let classes: Vec<String> = e.never_predicted.iter().map(|(label, rows)| format!("\"{label}\" ({rows} test rows)")).collect();
    Some(Limitation::new(
        "class_never_predicted",
        "Some classes are never predicted",
        format!("the deployed decision gives no test row the class {}; every row of those classes is misclassified", classes.join(", ")),
        "every class with test rows predicted for at least one test row".into(),
    ))
}
