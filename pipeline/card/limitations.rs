//! The rules that turn a results folder's figures into the card's "known limitations". Each rule
//! is a function of [`Evidence`], states the figure that triggered it and its threshold with the
//! threshold's source (a publication, or "common practice" for a rule of thumb), and is tested
//! both ways: on evidence that triggers it and on evidence that does not.

use serde::Serialize;

use super::evidence::Evidence;
use crate::format::sig;

#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Limitation {
    pub rule: &'static str,
    pub title: String,
    pub finding: String,
    pub threshold: String,
    /// Serious enough to change which model a reviewer should prefer, or whether to use one at
    /// all: the card's headline repeats it.
    pub serious: bool,
}

impl Limitation {
    fn new(rule: &'static str, title: &str, finding: String, threshold: String) -> Self {
        Limitation { rule, title: title.into(), finding, threshold, serious: false }
    }

    fn serious(self) -> Self {
        Limitation { serious: true, ..self }
    }
}

pub const MIN_ROWS_PER_PARAMETER: f64 = 10.0;
pub const MINORITY_SHARE: f64 = 0.10;
pub const MIN_TEST_ROWS_PER_CLASS: usize = 30;
pub const MIN_TEST_ROWS_REGRESSION: usize = 100;
/// Seed standard deviation above this share of the metric's scale is flagged.
pub const SEED_SD_SHARE: f64 = 0.01;
/// A train-validation gap above this share of the metric's scale is flagged.
pub const GAP_SHARE: f64 = 0.05;
pub const ECE_LIMIT: f64 = 0.05;
pub const MISSING_SHARE: f64 = 0.20;
/// The grid-edge rule applies to keys searched over at least this many ordered values.
pub const GRID_EDGE_MIN_VALUES: usize = 3;

fn few_rows_per_parameter(e: &Evidence) -> Option<Limitation> {
    let ratio = e.train_rows as f64 / e.parameter_count.max(1) as f64;
    (ratio < MIN_ROWS_PER_PARAMETER).then(|| {
        Limitation::new(
            "few_rows_per_parameter",
            "Few training rows per parameter",
            format!("{} training rows for {} parameters: {} rows per parameter", e.train_rows, e.parameter_count, sig(ratio, 3)),
            format!("at least {MIN_ROWS_PER_PARAMETER} rows per parameter (common practice)"),
        )
    })
}

fn small_minority_class(e: &Evidence) -> Option<Limitation> {
    let (label, rows, share) = e.minority.as_ref()?;
    (*share < MINORITY_SHARE).then(|| {
        Limitation::new(
            "small_minority_class",
            "Small minority class",
            format!(
                "class \"{label}\" has {rows} rows ({}% of the table); accuracy at the default threshold says little for it",
                sig(100.0 * share, 3)
            ),
            format!("every class at least {}% of the rows (common practice)", 100.0 * MINORITY_SHARE),
        )
    })
}

fn small_test_split(e: &Evidence) -> Option<Limitation> {
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

fn large_seed_spread(e: &Evidence) -> Option<Limitation> {
    let (mean, sd) = e.selected?;
    let (scale, what) = &e.scale;
    (sd > SEED_SD_SHARE * scale).then(|| {
        Limitation::new(
            "large_seed_spread",
            "Results vary across seeds",
            format!(
                "validation {} of the selected configuration: {} ± {} (standard deviation across seeds)",
                e.metric,
                sig(mean, 4),
                sig(sd, 2)
            ),
            format!("standard deviation at most {}% of {what} ({}) (common practice)", 100.0 * SEED_SD_SHARE, sig(*scale, 3)),
        )
    })
}

fn large_generalisation_gap(e: &Evidence) -> Option<Limitation> {
    let gap = e.gap?;
    let (scale, what) = &e.scale;
    (gap > GAP_SHARE * scale).then(|| {
        Limitation::new(
            "large_generalisation_gap",
            "Training and validation performance differ",
            format!(
                "{} is worse on validation rows than on training rows by {} (mean across seeds): a sign of overfitting",
                e.metric,
                sig(gap, 3)
            ),
            format!("gap at most {}% of {what} ({}) (common practice)", 100.0 * GAP_SHARE, sig(*scale, 3)),
        )
    })
}

fn poor_calibration(e: &Evidence) -> Option<Limitation> {
    let ece = e.test_ece?;
    (ece > ECE_LIMIT).then(|| Limitation::new(
        "poor_calibration",
        "Probabilities are poorly calibrated",
        format!("expected calibration error on the test split is {} (10 equal-width bins, right-closed, on top-label confidence; Guo et al. 2017)", sig(ece, 3)),
        format!("at most {ECE_LIMIT} (common practice)"),
    ))
}

fn no_better_than_chance(e: &Evidence) -> Option<Limitation> {
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

fn many_missing_values(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> =
        e.missing.iter().filter(|(_, s)| *s > MISSING_SHARE).map(|(n, s)| format!("{n} {}%", sig(100.0 * s, 3))).collect();
    (!flagged.is_empty()).then(|| {
        Limitation::new(
            "many_missing_values",
            "Features with many missing values",
            format!("missing shares: {}; the model sees the training median plus a missing flag for them", flagged.join(", ")),
            format!("at most {}% missing per feature (common practice)", 100.0 * MISSING_SHARE),
        )
    })
}

fn rare_levels(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> = e.rare_levels.iter().filter(|(_, n)| *n > 0).map(|(c, n)| format!("{c} ({n})")).collect();
    let rows = crate::data::summary::RARE_LEVEL_ROWS;
    (!flagged.is_empty()).then(|| {
        Limitation::new(
            "rare_levels",
            "Category levels seen only rarely",
            format!(
                "features with levels seen in fewer than {rows} rows: {}; effects of those levels are poorly estimated",
                flagged.join(", ")
            ),
            format!("every level seen in at least {rows} rows (common practice)"),
        )
    })
}

fn constant_on_training_rows(e: &Evidence) -> Option<Limitation> {
    (!e.constant_on_training.is_empty()).then(|| {
        Limitation::new(
            "constant_on_training_rows",
            "Features constant on the training rows",
            format!(
                "{} take one value on every training row, so the model cannot learn from them, yet they vary in validation or test",
                e.constant_on_training.join(", ")
            ),
            "every feature varies on the training rows".into(),
        )
    })
}

fn duplicates_across_splits(e: &Evidence) -> Option<Limitation> {
    let (test, validation) = e.duplicated_into_evaluation;
    (test + validation > 0).then(|| Limitation::new(
        "duplicates_across_splits",
        "Evaluation rows repeat training rows",
        format!("{test} test rows and {validation} validation rows are exact copies (features and target) of training rows; held-out figures are optimistic by as much as those rows are memorised"),
        "no evaluation row identical to a training row (common practice: remove duplicates or split them together)".into(),
    ))
}

fn repeated_key_across_splits(e: &Evidence) -> Option<Limitation> {
    let flagged: Vec<String> = e
        .crossing_keys
        .iter()
        .filter(|(_, crossing, _, _)| *crossing > 0)
        .map(|(c, crossing, values, rows)| format!("{c}: {crossing} of {values} values occur in more than one split, and {rows} validation or test rows share a value with training rows"))
        .collect();
    (!flagged.is_empty()).then(|| {
        Limitation::new(
            "repeated_key_across_splits",
            "The same units appear in training and evaluation",
            format!(
                "{}; held-out figures then describe units the model has seen, not new ones (set [split] group to keep them together)",
                flagged.join("; ")
            ),
            "every value of a repeated id or group column in one split only (common practice)".into(),
        )
    })
}

fn selection_at_grid_edge(e: &Evidence) -> Option<Limitation> {
    let edges: Vec<String> = e
        .grid
        .iter()
        .filter(|(_, _, position, count)| *count >= GRID_EDGE_MIN_VALUES && (*position == 0 || *position + 1 == *count))
        .map(|(k, v, position, count)| {
            format!("{k} = {v} is the {} of {count} values searched", if *position == 0 { "smallest" } else { "largest" })
        })
        .collect();
    (!edges.is_empty()).then(|| Limitation::new(
        "selection_at_grid_edge",
        "Selected setting at the end of its searched range",
        format!("{}; the validation metric may keep improving beyond the range, so the range may need widening", edges.join("; ")),
        format!("for keys searched over at least {GRID_EDGE_MIN_VALUES} ordered values, the selected value strictly inside (common practice)"),
    ))
}

/// Whether the network's validation mean beats the baseline's, and by more than the noise.
fn baseline_comparison(e: &Evidence) -> Option<(f64, f64, f64, f64, f64)> {
    let (net_mean, net_sd) = e.selected?;
    let (base_mean, base_sd) = e.baseline?;
    let noise = 2.0 * (net_sd * net_sd + base_sd * base_sd).sqrt();
    let advantage = if e.higher_is_better { net_mean - base_mean } else { base_mean - net_mean };
    Some((advantage, noise, net_mean, base_mean, net_sd.max(base_sd)))
}

const BASELINE_THRESHOLD: &str =
    "the network ahead of the linear baseline by more than twice the combined seed standard deviation (common practice)";

fn baseline_within_noise(e: &Evidence) -> Option<Limitation> {
    let (advantage, noise, _, _, _) = baseline_comparison(e)?;
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

fn baseline_beats_network(e: &Evidence) -> Option<Limitation> {
    let (advantage, noise, _, _, _) = baseline_comparison(e)?;
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

fn selection_within_noise(e: &Evidence) -> Option<Limitation> {
    let (mean, _) = e.selected?;
    let simpler: Vec<String> =
        e.simpler_within_noise.iter().map(|(label, params, m)| format!("{label} ({params} parameters, {})", sig(*m, 4))).collect();
    (!simpler.is_empty()).then(|| Limitation::new(
        "selection_within_noise",
        "A simpler configuration does as well within seed noise",
        format!("the selected configuration ({} parameters, validation {} {}) is within one standard error of {}; consider [selection] rule = \"one_standard_error\"", e.parameter_count, e.metric, sig(mean, 4), simpler.join(", ")),
        "no configuration with fewer parameters within one standard error of the selected mean (the one-standard-error rule: Breiman et al. 1984, section 3.4.3; common practice)".into(),
    ))
}

fn failed_runs(e: &Evidence) -> Option<Limitation> {
    (e.failed_runs > 0).then(|| {
        Limitation::new(
            "failed_runs",
            "Some runs failed or diverged",
            format!("{} run(s) did not complete; their configurations are summarised over fewer seeds", e.failed_runs),
            "every planned run completes".into(),
        )
    })
}

/// A limitation rule: the finding it states, if its figure crosses its threshold.
pub type Rule = fn(&Evidence) -> Option<Limitation>;

/// Every rule by name, in the order the card lists them (serious ones first).
pub const RULES: &[(&str, Rule)] = &[
    ("no_better_than_chance", no_better_than_chance),
    ("baseline_beats_network", baseline_beats_network),
    ("small_test_split", small_test_split),
    ("repeated_key_across_splits", repeated_key_across_splits),
    ("duplicates_across_splits", duplicates_across_splits),
    ("few_rows_per_parameter", few_rows_per_parameter),
    ("small_minority_class", small_minority_class),
    ("large_seed_spread", large_seed_spread),
    ("large_generalisation_gap", large_generalisation_gap),
    ("poor_calibration", poor_calibration),
    ("many_missing_values", many_missing_values),
    ("rare_levels", rare_levels),
    ("constant_on_training_rows", constant_on_training_rows),
    ("selection_at_grid_edge", selection_at_grid_edge),
    ("selection_within_noise", selection_within_noise),
    ("baseline_within_noise", baseline_within_noise),
    ("failed_runs", failed_runs),
];

pub fn derive(e: &Evidence) -> Vec<Limitation> {
    RULES.iter().filter_map(|(_, rule)| rule(e)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn healthy() -> Evidence {
        Evidence {
            classification: true,
            train_rows: 10_000,
            parameter_count: 500,
            minority: Some(("yes".into(), 3000, 0.3)),
            metric: "roc_auc".into(),
            higher_is_better: true,
            scale: (1.0, "the metric's range".into()),
            selected: Some((0.85, 0.004)),
            baseline: Some((0.75, 0.002)),
            gap: Some(0.01),
            test_ece: Some(0.02),
            chance: Some(("roc_auc".into(), 0.84, 0.82, 0.86, 0.5)),
            test_rows: 4000,
            test_smallest_class: Some(("yes".into(), 1200)),
            degenerate_intervals: Vec::new(),
            missing: vec![("a".into(), 0.05)],
            rare_levels: vec![("c".into(), 0)],
            grid: vec![("model.dropout".into(), "0.1".into(), 1, 3)],
            simpler_within_noise: Vec::new(),
            duplicated_into_evaluation: (0, 0),
            constant_on_training: Vec::new(),
            crossing_keys: vec![("bed".into(), 0, 40, 0)],
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
    fn each_rule_triggers_on_its_figure_and_only_it() {
        type Change = Box<dyn Fn(&mut Evidence)>;
        let cases: Vec<(&str, Change)> = vec![
            ("few_rows_per_parameter", Box::new(|e| e.parameter_count = 2000)),
            ("small_minority_class", Box::new(|e| e.minority = Some(("yes".into(), 900, 0.09)))),
            ("small_test_split", Box::new(|e| e.test_smallest_class = Some(("yes".into(), 29)))),
            ("small_test_split", Box::new(|e| e.degenerate_intervals = vec!["roc_auc".into()])),
            ("large_seed_spread", Box::new(|e| e.selected = Some((0.85, 0.011)))),
            ("large_generalisation_gap", Box::new(|e| e.gap = Some(0.051))),
            ("poor_calibration", Box::new(|e| e.test_ece = Some(0.09))),
            ("no_better_than_chance", Box::new(|e| e.chance = Some(("roc_auc".into(), 0.435, 0.40, 0.47, 0.5)))),
            ("no_better_than_chance", Box::new(|e| e.chance = Some(("roc_auc".into(), 0.55, 0.49, 0.61, 0.5)))),
            ("many_missing_values", Box::new(|e| e.missing.push(("b".into(), 0.4)))),
            ("rare_levels", Box::new(|e| e.rare_levels.push(("d".into(), 2)))),
            ("constant_on_training_rows", Box::new(|e| e.constant_on_training = vec!["flag".into()])),
            ("duplicates_across_splits", Box::new(|e| e.duplicated_into_evaluation = (3, 0))),
            ("repeated_key_across_splits", Box::new(|e| e.crossing_keys[0].1 = 25)),
            ("selection_at_grid_edge", Box::new(|e| e.grid[0].2 = 2)),
            ("selection_within_noise", Box::new(|e| e.simpler_within_noise = vec![("hidden=[16]".into(), 401, 0.849)])),
            ("baseline_within_noise", Box::new(|e| e.baseline = Some((0.845, 0.004)))),
            ("baseline_beats_network", Box::new(|e| e.baseline = Some((0.87, 0.002)))),
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
    fn every_rule_is_listed_once_under_its_own_name() {
        let mut names: Vec<&str> = RULES.iter().map(|(n, _)| *n).collect();
        names.sort_unstable();
        names.dedup();
        assert_eq!(names.len(), RULES.len());
    }

    #[test]
    fn spread_and_gap_are_judged_on_the_metric_scale() {
        // Log loss near zero (2.6e-7 ± 2.4e-7) against a class-prior log loss of 0.66: no spread.
        let mut e = Evidence {
            metric: "log_loss".into(),
            higher_is_better: false,
            scale: (0.66, "the class-prior log loss".into()),
            selected: Some((2.6e-7, 2.4e-7)),
            gap: Some(-1e-7),
            baseline: None,
            ..healthy()
        };
        assert!(!fires("large_seed_spread", &e) && !fires("large_generalisation_gap", &e));
        e.selected = Some((0.30, 0.01));
        e.gap = Some(0.05);
        assert!(fires("large_seed_spread", &e) && fires("large_generalisation_gap", &e));
        // RMSE on a target with standard deviation 77: 0.5 across seeds is small, 3 is not.
        let mut e = Evidence {
            classification: false,
            metric: "rmse".into(),
            higher_is_better: false,
            scale: (77.0, "the target's standard deviation".into()),
            selected: Some((59.25, 0.5)),
            gap: Some(1.0),
            baseline: None,
            ..healthy()
        };
        assert!(!fires("large_seed_spread", &e));
        e.selected = Some((59.25, 3.0));
        assert!(fires("large_seed_spread", &e));
    }

    #[test]
    fn two_value_grids_never_count_as_an_edge() {
        let mut e = healthy();
        e.grid = vec![("model.dropout".into(), "0.2".into(), 1, 2), ("training.weight_decay".into(), "0".into(), 0, 2)];
        assert!(!fires("selection_at_grid_edge", &e));
    }

    #[test]
    fn lower_is_better_metrics_compare_the_baseline_the_right_way() {
        let mut e = Evidence {
            classification: false,
            metric: "rmse".into(),
            higher_is_better: false,
            scale: (77.0, "sd".into()),
            baseline: Some((56.24, 0.92)),
            selected: Some((59.25, 0.50)),
            ..healthy()
        };
        assert!(fires("baseline_beats_network", &e));
        assert!(derive(&e)[0].serious);
        e.baseline = Some((62.5, 0.9));
        assert!(!fires("baseline_beats_network", &e) && !fires("baseline_within_noise", &e));
    }
}
