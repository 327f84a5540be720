//! The rules that turn a results folder's figures into the card's "known limitations". Each rule
//! is a function of [`Evidence`], states the figure that triggered it and its threshold with the
//! threshold's source (a publication, or "common practice" for a rule of thumb), and is tested
//! both ways: on evidence that triggers it and on evidence that does not.

//!
//! Rules live by family (`data`, `fit`, `evaluation`, `groups`); `RULES` lists them in the card's order.

pub(crate) mod data;
pub(crate) mod drivers;
pub(crate) mod evaluation;
pub(crate) mod finding;
pub(crate) mod fit;
pub(crate) mod groups;

pub(crate) use finding::*;

use crate::card::evidence::Evidence;
use data::*;
use drivers::*;
use evaluation::*;
use fit::*;
use groups::*;

pub(crate) type Rule = fn(&Evidence) -> Option<Limitation>;

/// Every rule by name, in the order the card lists them (serious ones first).
pub(crate) const RULES: &[(&str, Rule)] = &[
    ("no_better_than_chance", no_better_than_chance),
    ("baseline_beats_network", baseline_beats_network),
    ("small_test_split", small_test_split),
    ("class_never_predicted", class_never_predicted),
    ("repeated_key_across_splits", repeated_key_across_splits),
    ("duplicates_across_splits", duplicates_across_splits),
    ("few_rows_per_parameter", few_rows_per_parameter),
    ("small_minority_class", small_minority_class),
    ("large_seed_spread", large_seed_spread),
    ("large_generalisation_gap", large_generalisation_gap),
    ("poor_calibration", poor_calibration),
    ("interval_undercoverage", interval_undercoverage),
    ("adverse_impact", adverse_impact),
    ("error_rate_gap", error_rate_gap),
    ("group_calibration", group_calibration),
    ("leans_on_sensitive_feature", leans_on_sensitive_feature),
    ("sharp_sensitivity", sharp_sensitivity),
    ("many_missing_values", many_missing_values),
    ("rare_levels", rare_levels),
    ("constant_on_training_rows", constant_on_training_rows),
    ("selection_at_grid_edge", selection_at_grid_edge),
    ("selection_within_noise", selection_within_noise),
    ("baseline_within_noise", baseline_within_noise),
    ("baseline_better_on_other_metrics", baseline_better_on_other_metrics),
    ("failed_runs", failed_runs),
];

pub(crate) fn derive(e: &Evidence) -> Vec<Limitation> {
    RULES.iter().filter_map(|(_, rule)| rule(e)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::analysis::fairness::{Estimate, FairnessReport, GroupDisparity, GroupFigures, ADVERSE_IMPACT_RATIO, ECE, FPR_GAP, TPR_GAP};
    use crate::card::evidence::{ClassShare, MetricPair};

    fn healthy() -> Evidence {
        Evidence {
            classification: true,
            train_rows: 10_000,
            parameter_count: 500,
            classes: vec![
                ClassShare { label: "no".into(), rows: 7000, share: 0.7 },
                ClassShare { label: "yes".into(), rows: 3000, share: 0.3 },
            ],
            metric: "roc_auc".into(),
            higher_is_better: true,
            scale: (1.0, "the metric's range".into()),
            selected: Some((0.85, 0.004)),
            baseline: Some((0.75, 0.002)),
            baseline_other_metrics: vec![MetricPair {
                metric: "balanced_accuracy".into(),
                higher_is_better: true,
                network: (0.80, 0.005),
                baseline: (0.72, 0.004),
            }],
            never_predicted: Vec::new(),
            gap: Some(0.01),
            test_ece: Some(0.02),
            test_ece_lower: Some(0.01),
            interval_coverage: None,
            fairness: None,
            importance: None,
            sensitivity: None,
            sensitive: Vec::new(),
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
            constant_everywhere: Vec::new(),
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
            ("few_rows_per_parameter", Box::new(|e| (e.parameter_count, e.gap) = (2000, Some(0.03)))),
            ("small_minority_class", Box::new(|e| e.classes[1] = ClassShare { label: "yes".into(), rows: 900, share: 0.09 })),
            ("small_test_split", Box::new(|e| e.test_smallest_class = Some(("yes".into(), 29)))),
            ("small_test_split", Box::new(|e| e.degenerate_intervals = vec!["roc_auc".into()])),
            ("large_seed_spread", Box::new(|e| e.selected = Some((0.85, 0.011)))),
            ("large_generalisation_gap", Box::new(|e| e.gap = Some(0.051))),
            ("poor_calibration", Box::new(|e| (e.test_ece, e.test_ece_lower) = (Some(0.09), Some(0.06)))),
            ("interval_undercoverage", Box::new(|e| e.interval_coverage = Some((0.9, 0.8, 0.85, 160, 200)))),
            ("adverse_impact", Box::new(|e| e.fairness = Some(groups_with(&[(ADVERSE_IMPACT_RATIO, 0.7, 0.62, 0.78)], true)))),
            ("adverse_impact", Box::new(|e| e.fairness = Some(groups_with(&[(ADVERSE_IMPACT_RATIO, 0.78, 0.7, 0.86)], true)))),
            ("error_rate_gap", Box::new(|e| e.fairness = Some(groups_with(&[(TPR_GAP, -0.2, -0.28, -0.12)], true)))),
            ("group_calibration", Box::new(|e| e.fairness = Some(groups_with(&[(ECE, 0.09, 0.06, 0.12)], true)))),
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
            ("baseline_better_on_other_metrics", Box::new(|e| e.baseline_other_metrics[0].baseline = (0.82, 0.004))),
            ("class_never_predicted", Box::new(|e| e.never_predicted = vec![("yes".into(), 1200)])),
        ];
        for (rule, change) in cases {
            let mut e = healthy();
            assert!(!fires(rule, &e), "{rule} fired on healthy evidence");
            change(&mut e);
            assert!(fires(rule, &e), "{rule} did not fire");
            assert_eq!(derive(&e).len(), 1, "{rule}: other rules fired too: {:?}", derive(&e));
        }
    }

    /// A disparity report of one column: reference group `a` and group `b` with `figures`
    /// (name, value, lower, upper); `b` judged or not.
    fn groups_with(figures: &[(&str, f64, f64, f64)], judged: bool) -> FairnessReport {
        let group = |level: &str, judged: bool, figures: &[(&str, f64, f64, f64)]| GroupFigures {
            level: level.into(),
            rows: if judged { 500 } else { 20 },
            judged,
            base_rate: 0.2,
            confusion: None,
            figures: figures.iter().map(|(n, v, l, u)| (n.to_string(), Estimate { value: *v, lower: *l, upper: *u })).collect(),
        };
        FairnessReport {
            threshold: Some(0.5),
            favourable: Some("no".into()),
            favourable_is_positive: false,
            minimum_group_rows: 30,
            rate_gap: 0.1,
            resamples: 1000,
            proxies: Vec::new(),
            columns: vec![GroupDisparity {
                column: "region".into(),
                reference: Some("a".into()),
                groups: vec![group("a", true, &[(ADVERSE_IMPACT_RATIO, 1.0, 1.0, 1.0)]), group("b", judged, figures)],
            }],
        }
    }

    #[test]
    fn group_rules_stay_silent_within_their_limits_or_on_groups_not_judged() {
        let silent: Vec<(&str, FairnessReport)> = vec![
            ("adverse_impact", groups_with(&[(ADVERSE_IMPACT_RATIO, 0.85, 0.74, 0.95)], true)),
            ("adverse_impact", groups_with(&[(ADVERSE_IMPACT_RATIO, 0.5, 0.3, 0.7)], false)),
            ("adverse_impact", FairnessReport { favourable: None, ..groups_with(&[(ADVERSE_IMPACT_RATIO, 0.5, 0.3, 0.7)], true) }),
            ("error_rate_gap", groups_with(&[(TPR_GAP, -0.2, -0.35, 0.02)], true)),
            ("error_rate_gap", groups_with(&[(FPR_GAP, 0.12, 0.05, 0.2)], true)),
            ("group_calibration", groups_with(&[(ECE, 0.09, 0.04, 0.12)], true)),
        ];
        for (rule, report) in silent {
            let mut e = healthy();
            e.fairness = Some(report);
            assert!(!fires(rule, &e), "{rule} fired: {:?}", derive(&e));
        }
        // Calibration within a group is not flagged as a group finding when it fails overall.
        let mut e = healthy();
        e.fairness = Some(groups_with(&[(ECE, 0.09, 0.06, 0.12)], true));
        e.test_ece = Some(0.08);
        assert!(!fires("group_calibration", &e));
    }

    /// Groups drawn with equal base rates and equal score distributions: the four-fifths rule and
    /// the error-rate rule stay silent in at least 95 of 100 seeds (each seed two groups of 500
    /// test rows, 200 resamples within groups).
    #[test]
    fn group_rules_stay_silent_on_groups_drawn_alike() {
        use crate::analysis::fairness::{analyse, Decision};
        use crate::rng::{Purpose, Stream};
        let mut silent = [0usize; 2];
        for seed in 0..100u64 {
            let mut stream = Stream::new(seed, Purpose::DemoData);
            let (mut y, mut probs, mut labels) = (Vec::new(), Vec::new(), Vec::new());
            for i in 0..1000 {
                let positive = stream.uniform() < 0.3;
                // Box-Muller from two uniforms: the same score distribution in both groups.
                let (u, v) = (stream.uniform().max(1e-12), stream.uniform());
                let noise = (-2.0 * u.ln()).sqrt() * (2.0 * std::f64::consts::PI * v).cos();
                let p = (0.3 + if positive { 0.25 } else { -0.1 } + 0.15 * noise).clamp(0.001, 0.999);
                y.push(positive as usize);
                probs.extend([1.0 - p, p]);
                labels.push(Some(if i % 2 == 0 { "a" } else { "b" }.to_string()));
            }
            let report = analyse(
                crate::manifest::Task::Binary,
                &[crate::selection::GroupColumn { name: "g".into(), labels }],
                &crate::training::Labels::Classes { rows: y, classes: 2 },
                &probs,
                Some(Decision { threshold: 0.35, favourable: Some("no".into()), favourable_is_positive: false }),
                &crate::manifest::FairnessSpec::default(),
                200,
                seed,
            );
            let mut e = healthy();
            e.fairness = report;
            silent[0] += !fires("adverse_impact", &e) as usize;
            silent[1] += !fires("error_rate_gap", &e) as usize;
        }
        eprintln!("groups drawn alike, 100 seeds: adverse_impact silent {}, error_rate_gap silent {}", silent[0], silent[1]);
        assert!(silent[0] >= 95 && silent[1] >= 95, "{silent:?}");
    }

    #[test]
    fn interval_coverage_within_noise_does_not_fire() {
        let mut e = healthy();
        e.interval_coverage = Some((0.9, 0.88, 0.92, 176, 200));
        assert!(!fires("interval_undercoverage", &e));
        e.interval_coverage = Some((0.9, 0.97, 0.99, 194, 200));
        assert!(!fires("interval_undercoverage", &e), "over-coverage is not a shortfall");
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
