//! The rules that turn a results folder's figures into the card's "known limitations". Each rule
//! is a function of [`Evidence`], states the figure that triggered it and its threshold, and has a
//! test that triggers it and one that does not.

use serde::Serialize;

use crate::format::sig;

/// The figures the rules read, gathered once from the stored results.
#[derive(Debug, Clone, Default)]
pub struct Evidence {
    pub train_rows: usize,
    pub parameter_count: usize,
    /// (label, rows in the whole table, share) of the rarest class, for classifiers.
    pub minority: Option<(String, usize, f64)>,
    pub metric: String,
    /// Mean and standard deviation across seeds of the selected configuration's validation metric.
    pub selected: Option<(f64, f64)>,
    /// The same for the linear baseline.
    pub baseline: Option<(f64, f64)>,
    /// Train minus validation of the selection metric, oriented so positive means "train better".
    pub gap: Option<f64>,
    /// Whether the metric is bounded in [0, 1] (AUC, accuracy...) or on the target's scale.
    pub bounded_metric: bool,
    pub test_ece: Option<f64>,
    /// (feature, missing share) of every feature.
    pub missing: Vec<(String, f64)>,
    /// (feature, number of levels with fewer than RARE_LEVEL_ROWS rows) for categorical features.
    pub rare_levels: Vec<(String, usize)>,
    /// (grid key, selected value, every value in grid order) for numeric or list-valued grid keys.
    pub grid: Vec<(String, String, usize, usize)>,
    pub failed_runs: usize,
}

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Limitation {
    pub rule: &'static str,
    pub title: String,
    pub finding: String,
    pub threshold: String,
}

pub const MIN_ROWS_PER_PARAMETER: f64 = 10.0;
pub const MINORITY_SHARE: f64 = 0.10;
pub const MINORITY_ROWS: usize = 200;
pub const SEED_SD_BOUNDED: f64 = 0.01;
pub const SEED_SD_RELATIVE: f64 = 0.05;
pub const GAP_BOUNDED: f64 = 0.05;
pub const GAP_RELATIVE: f64 = 0.10;
pub const ECE_LIMIT: f64 = 0.05;
pub const MISSING_SHARE: f64 = 0.20;

fn few_rows_per_parameter(e: &Evidence) -> Option<Limitation> {
    let ratio = e.train_rows as f64 / e.parameter_count.max(1) as f64;
    (ratio < MIN_ROWS_PER_PARAMETER).then(|| Limitation {
        rule: "few_rows_per_parameter",
        title: "Few training rows per parameter".into(),
        finding: format!("{} training rows for {} parameters: {} rows per parameter", e.train_rows, e.parameter_count, sig(ratio, 3)),
        threshold: format!("at least {MIN_ROWS_PER_PARAMETER} rows per parameter (common practice)"),
    })
}

fn small_minority_class(e: &Evidence) -> Option<Limitation> {
    let (label, rows, share) = e.minority.as_ref()?;
    (*share < MINORITY_SHARE || *rows < MINORITY_ROWS).then(|| Limitation {
        rule: "small_minority_class",
        title: "Small minority class".into(),
        finding: format!("class \"{label}\" has {rows} rows ({}% of the table)", sig(100.0 * share, 3)),
        threshold: format!("at least {}% and {MINORITY_ROWS} rows (common practice)", 100.0 * MINORITY_SHARE),
    })
}

fn large_seed_spread(e: &Evidence) -> Option<Limitation> {
    let (mean, sd) = e.selected?;
    let (triggered, threshold) = if e.bounded_metric {
        (sd > SEED_SD_BOUNDED, format!("standard deviation at most {SEED_SD_BOUNDED} (common practice)"))
    } else {
        (sd > SEED_SD_RELATIVE * mean.abs(), format!("standard deviation at most {}% of the mean (common practice)", 100.0 * SEED_SD_RELATIVE))
    };
    triggered.then(|| Limitation {
        rule: "large_seed_spread",
        title: "Results vary across seeds".into(),
        finding: format!("validation {} of the selected configuration: {} ± {} across seeds", e.metric, sig(mean, 4), sig(sd, 3)),
        threshold,
    })
}

fn large_generalisation_gap(e: &Evidence) -> Option<Limitation> {
    let gap = e.gap?;
    let (mean, _) = e.selected?;
    let (triggered, threshold) = if e.bounded_metric {
        (gap > GAP_BOUNDED, format!("train-validation gap at most {GAP_BOUNDED} (common practice)"))
    } else {
        (gap > GAP_RELATIVE * mean.abs(), format!("train-validation gap at most {}% of the validation value (common practice)", 100.0 * GAP_RELATIVE))
    };
    triggered.then(|| Limitation {
        rule: "large_generalisation_gap",
        title: "Training and validation performance differ".into(),
        finding: format!("{} is better on training rows than on validation rows by {} (mean across seeds): a sign of overfitting", e.metric, sig(gap, 3)),
        threshold,
    })
}

fn poor_calibration(e: &Evidence) -> Option<Limitation> {
    let ece = e.test_ece?;
    (ece > ECE_LIMIT).then(|| Limitation {
        rule: "poor_calibration",
        title: "Probabilities are poorly calibrated".into(),
        finding: format!("expected calibration error on the test split is {} (10 equal-width bins on top-label confidence)", sig(ece, 3)),
        threshold: format!("at most {ECE_LIMIT} (common practice)"),
    })
}

fn many_missing_values(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> = e.missing.iter().filter(|(_, s)| *s > MISSING_SHARE).map(|(n, s)| format!("{n} {}%", sig(100.0 * s, 3))).collect();
    (!flagged.is_empty()).then(|| Limitation {
        rule: "many_missing_values",
        title: "Features with many missing values".into(),
        finding: format!("missing shares: {}; the model sees the training median plus a missing flag for them", flagged.join(", ")),
        threshold: format!("at most {}% missing per feature (common practice)", 100.0 * MISSING_SHARE),
    })
}

fn rare_levels(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> = e.rare_levels.iter().filter(|(_, n)| *n > 0).map(|(c, n)| format!("{c} ({n})")).collect();
    (!flagged.is_empty()).then(|| Limitation {
        rule: "rare_levels",
        title: "Category levels seen only rarely".into(),
        finding: format!("features with levels seen in fewer than {} rows: {}; effects of those levels are poorly estimated", crate::data::summary::RARE_LEVEL_ROWS, flagged.join(", ")),
        threshold: format!("every level seen in at least {} rows (common practice)", crate::data::summary::RARE_LEVEL_ROWS),
    })
}

fn selection_at_grid_edge(e: &Evidence) -> Option<Limitation> {
    let edges: Vec<String> = e
        .grid
        .iter()
        .filter(|(_, _, position, count)| *count >= 2 && (*position == 0 || *position + 1 == *count))
        .map(|(k, v, _, _)| format!("{k} = {v}"))
        .collect();
    (!edges.is_empty()).then(|| Limitation {
        rule: "selection_at_grid_edge",
        title: "Selected configuration at the edge of the searched grid".into(),
        finding: format!("{} is the smallest or largest value searched; a better setting may lie outside the grid", edges.join(", ")),
        threshold: "selected values strictly inside the searched range".into(),
    })
}

fn baseline_within_noise(e: &Evidence) -> Option<Limitation> {
    let (net_mean, net_sd) = e.selected?;
    let (base_mean, base_sd) = e.baseline?;
    let noise = 2.0 * (net_sd * net_sd + base_sd * base_sd).sqrt();
    ((net_mean - base_mean).abs() <= noise).then(|| Limitation {
        rule: "baseline_within_noise",
        title: "The network does not clearly beat the linear baseline".into(),
        finding: format!("validation {}: network {} ± {}, linear baseline {} ± {}", e.metric, sig(net_mean, 4), sig(net_sd, 3), sig(base_mean, 4), sig(base_sd, 3)),
        threshold: "difference larger than twice the combined seed standard deviation (common practice)".into(),
    })
}

fn failed_runs(e: &Evidence) -> Option<Limitation> {
    (e.failed_runs > 0).then(|| Limitation {
        rule: "failed_runs",
        title: "Some runs failed or diverged".into(),
        finding: format!("{} run(s) did not complete; their configurations are summarised over fewer seeds", e.failed_runs),
        threshold: "every planned run completes".into(),
    })
}

/// Every rule, in the order the card lists them.
pub fn derive(e: &Evidence) -> Vec<Limitation> {
    [
        few_rows_per_parameter,
        small_minority_class,
        large_seed_spread,
        large_generalisation_gap,
        poor_calibration,
        many_missing_values,
        rare_levels,
        selection_at_grid_edge,
        baseline_within_noise,
        failed_runs,
    ]
    .iter()
    .filter_map(|rule| rule(e))
    .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn healthy() -> Evidence {
        Evidence {
            train_rows: 10_000,
            parameter_count: 500,
            minority: Some(("yes".into(), 3000, 0.3)),
            metric: "roc_auc".into(),
            selected: Some((0.85, 0.004)),
            baseline: Some((0.75, 0.002)),
            gap: Some(0.01),
            bounded_metric: true,
            test_ece: Some(0.02),
            missing: vec![("a".into(), 0.05)],
            rare_levels: vec![("c".into(), 0)],
            grid: vec![("model.dropout".into(), "0.1".into(), 1, 3)],
            failed_runs: 0,
        }
    }

    fn fires(rule: &str, e: &Evidence) -> bool {
        derive(e).iter().any(|l| l.rule == rule)
    }

    #[test]
    fn a_healthy_experiment_triggers_nothing() {
        assert_eq!(derive(&healthy()), vec![]);
    }

    #[test]
    fn each_rule_triggers_on_its_figure() {
        let cases: Vec<(&str, Box<dyn Fn(&mut Evidence)>)> = vec![
            ("few_rows_per_parameter", Box::new(|e| e.parameter_count = 2000)),
            ("small_minority_class", Box::new(|e| e.minority = Some(("yes".into(), 150, 0.015)))),
            ("large_seed_spread", Box::new(|e| e.selected = Some((0.85, 0.02)))),
            ("large_generalisation_gap", Box::new(|e| e.gap = Some(0.08))),
            ("poor_calibration", Box::new(|e| e.test_ece = Some(0.09))),
            ("many_missing_values", Box::new(|e| e.missing.push(("b".into(), 0.4)))),
            ("rare_levels", Box::new(|e| e.rare_levels.push(("d".into(), 2)))),
            ("selection_at_grid_edge", Box::new(|e| e.grid[0].2 = 2)),
            ("baseline_within_noise", Box::new(|e| e.baseline = Some((0.845, 0.004)))),
            ("failed_runs", Box::new(|e| e.failed_runs = 1)),
        ];
        for (rule, change) in cases {
            let mut e = healthy();
            assert!(!fires(rule, &e), "{rule} fired on healthy evidence");
            change(&mut e);
            assert!(fires(rule, &e), "{rule} did not fire");
            assert_eq!(derive(&e).len(), 1, "{rule}: other rules fired too: {:?}", derive(&e));
        }
    }

    #[test]
    fn unbounded_metrics_use_relative_thresholds() {
        let mut e = Evidence { metric: "rmse".into(), bounded_metric: false, selected: Some((2.0, 0.05)), gap: Some(0.1), ..healthy() };
        assert!(!fires("large_seed_spread", &e) && !fires("large_generalisation_gap", &e));
        e.selected = Some((2.0, 0.2));
        e.gap = Some(0.3);
        assert!(fires("large_seed_spread", &e) && fires("large_generalisation_gap", &e));
    }
}
