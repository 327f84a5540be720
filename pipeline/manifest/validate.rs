//! Value ranges and cross-key rules of a parsed manifest. Each problem names its key path; the
//! loader turns that path into a line and column.

use super::locate::KeyPath;
use super::schema::*;
use crate::metrics::registry;

/// One problem found in a manifest.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Problem {
    pub key: KeyPath,
    /// Element of an array value the problem belongs to, if any.
    pub index: Option<usize>,
    pub message: String,
    pub hint: Option<String>,
}

struct Collector(Vec<Problem>);

impl Collector {
    fn check(&mut self, ok: bool, key: &str, message: impl FnOnce() -> String) {
        if !ok {
            self.0.push(Problem { key: KeyPath::parse_dotted(key), index: None, message: message(), hint: None });
        }
    }

    fn hint(&mut self, ok: bool, key: &str, message: impl FnOnce() -> String, hint: &str) {
        if !ok {
            self.0.push(Problem { key: KeyPath::parse_dotted(key), index: None, message: message(), hint: Some(hint.to_string()) });
        }
    }
}

/// Checks the parts of a manifest a sweep can vary: model and training settings.
pub(crate) fn validate_run_settings(task: Task, model: &ModelSpec, training: &TrainingSpec) -> Vec<Problem> {
    let mut c = Collector(Vec::new());
    c.hint(
        !model.hidden.is_empty(),
        "model.hidden",
        || "must list at least one hidden width".into(),
        "the linear baseline without hidden layers is trained automatically; see selection.baseline",
    );
    if let Some(i) = model.hidden.iter().position(|&w| w == 0 || w > 65_536) {
        c.0.push(Problem {
            key: KeyPath::parse_dotted("model.hidden"),
            index: Some(i),
            message: format!("width {} must be between 1 and 65536", model.hidden[i]),
            hint: None,
        });
    }
    c.check((0.0..1.0).contains(&model.dropout), "model.dropout", || format!("must be in [0, 1), got {:?}", model.dropout));
    c.check(model.input_noise.is_finite() && model.input_noise >= 0.0, "model.input_noise", || {
        format!("must be a finite standard deviation >= 0, got {:?}", model.input_noise)
    });
    if model.residual {
        if model.hidden.len() < 2 {
            c.check(false, "model.residual", || {
                "needs at least two hidden layers: the first projects the inputs, later equal-width layers become residual blocks".into()
            });
        } else if let Some(i) = (1..model.hidden.len()).find(|&i| model.hidden[i] != model.hidden[i - 1]) {
            c.check(false, "model.residual", || {
                format!(
                    "hidden widths {:?} differ at layer {} ({} -> {}); a residual block x + f(x) needs equal widths",
                    model.hidden,
                    i + 1,
                    model.hidden[i - 1],
                    model.hidden[i]
                )
            });
        }
    }

    let t = training;
    c.check(t.learning_rate.is_finite() && t.learning_rate > 0.0, "training.learning_rate", || {
        format!("must be a positive number, got {:?}", t.learning_rate)
    });
    c.check(t.weight_decay.is_finite() && t.weight_decay >= 0.0, "training.weight_decay", || {
        format!("must be >= 0, got {}", t.weight_decay)
    });
    c.check(t.l2_penalty.is_finite() && t.l2_penalty >= 0.0, "training.l2_penalty", || format!("must be >= 0, got {}", t.l2_penalty));
    c.hint(
        !(t.optimizer == Optimizer::Adam && t.weight_decay > 0.0),
        "training.weight_decay",
        || "adam applies no decoupled weight decay".into(),
        "use optimizer = \"adamw\" for decoupled decay, or l2_penalty for a coupled penalty",
    );
    c.check((0.0..1.0).contains(&t.momentum), "training.momentum", || format!("must be in [0, 1), got {}", t.momentum));
    c.check(!t.nesterov || (t.optimizer == Optimizer::Sgd && t.momentum > 0.0), "training.nesterov", || {
        "Nesterov momentum needs optimizer = \"sgd\" and momentum > 0".into()
    });
    c.check((0.0..1.0).contains(&t.beta1), "training.beta1", || format!("must be in [0, 1), got {}", t.beta1));
    c.check((0.0..1.0).contains(&t.beta2), "training.beta2", || format!("must be in [0, 1), got {}", t.beta2));
    c.check(t.epsilon.is_finite() && t.epsilon > 0.0, "training.epsilon", || format!("must be > 0, got {}", t.epsilon));
    c.check((1..=100_000).contains(&t.epochs), "training.epochs", || format!("must be between 1 and 100000, got {}", t.epochs));
    c.check((1..=1_000_000).contains(&t.batch_size), "training.batch_size", || {
        format!("must be between 1 and 1000000, got {}", t.batch_size)
    });
    c.check(t.warmup_epochs < t.epochs, "training.warmup_epochs", || {
        format!("must be smaller than epochs ({}), got {}", t.epochs, t.warmup_epochs)
    });
    c.check(t.step_epochs >= 1, "training.step_epochs", || "must be at least 1".into());
    c.check(t.step_gamma > 0.0 && t.step_gamma <= 1.0, "training.step_gamma", || format!("must be in (0, 1], got {}", t.step_gamma));
    c.check(t.clip_norm.is_finite() && t.clip_norm >= 0.0, "training.clip_norm", || {
        format!("must be >= 0 (0 turns clipping off), got {}", t.clip_norm)
    });
    c.check(t.huber_delta.is_finite() && t.huber_delta > 0.0, "training.huber_delta", || format!("must be > 0, got {}", t.huber_delta));
    c.check(!(t.loss == RegressionLoss::Huber && task != Task::Regression), "training.loss", || {
        format!("\"huber\" is a regression loss, but data.task is \"{}\"", task.as_str())
    });
    c.check(!t.early_stopping.enabled || t.early_stopping.patience >= 1, "training.early_stopping.patience", || {
        "must be at least 1 when early stopping is enabled".into()
    });
    c.check(t.early_stopping.min_delta.is_finite() && t.early_stopping.min_delta >= 0.0, "training.early_stopping.min_delta", || {
        format!("must be >= 0, got {}", t.early_stopping.min_delta)
    });
    c.0
}

/// The columns `predict` writes beside the ids, and those reserved for later versions (and
/// `p_<class>` per class probability, checked when the classes are known).
use crate::output_schema::FIXED_NAMES as PREDICT_OUTPUT_COLUMNS;

/// Checks a whole manifest except the grid's values (see `grid.rs`).
pub(crate) fn validate(m: &Manifest) -> Vec<Problem> {
    let mut c = Collector(Vec::new());
    c.check(!m.experiment.name.trim().is_empty(), "experiment.name", || "must not be empty".into());
    c.check(!m.data.path.trim().is_empty(), "data.path", || "must name a Parquet file".into());
    c.check(!m.data.target.trim().is_empty(), "data.target", || "must name the target column".into());
    for (list, key) in [
        (&m.data.features, "data.features"),
        (&m.data.drop, "data.drop"),
        (&m.data.ids, "data.ids"),
        (&m.data.categorical, "data.categorical"),
        (&m.data.group_columns, "data.group_columns"),
    ] {
        if let Some(i) = list.iter().position(|c| c == &m.data.target) {
            if key != "data.categorical" {
                c.0.push(Problem {
                    key: KeyPath::parse_dotted(key),
                    index: Some(i),
                    message: format!("lists the target column `{}`", m.data.target),
                    hint: None,
                });
            }
        }
        let mut seen = std::collections::BTreeSet::new();
        if let Some(i) = list.iter().position(|c| !seen.insert(c)) {
            c.0.push(Problem {
                key: KeyPath::parse_dotted(key),
                index: Some(i),
                message: format!("lists `{}` twice", list[i]),
                hint: None,
            });
        }
    }
    // Ids are copied into predict's output beside its own columns: the names must not clash.
    if let Some(i) = m.data.ids.iter().position(|id| PREDICT_OUTPUT_COLUMNS.contains(&id.as_str())) {
        c.0.push(Problem {
            key: KeyPath::parse_dotted("data.ids"),
            index: Some(i),
            message: format!(
                "`{}` clashes with the name of one of predict's output columns ({})",
                m.data.ids[i],
                PREDICT_OUTPUT_COLUMNS.join(", ")
            ),
            hint: Some("rename the id column in the data".into()),
        });
    }
    if let Some(i) = m.data.features.iter().position(|f| m.data.drop.contains(f) || m.data.ids.contains(f)) {
        c.0.push(Problem {
            key: KeyPath::parse_dotted("data.features"),
            index: Some(i),
            message: format!("`{}` is also listed in data.drop or data.ids", m.data.features[i]),
            hint: None,
        });
    }
    c.check(m.data.positive_label.is_none() || m.data.task == Task::Binary, "data.positive_label", || {
        "only applies to task = \"binary\"".into()
    });

    let s = &m.split;
    c.check(s.validation > 0.0 && s.validation < 1.0, "split.validation", || format!("must be in (0, 1), got {:?}", s.validation));
    c.check(s.test > 0.0 && s.test < 1.0, "split.test", || format!("must be in (0, 1), got {:?}", s.test));
    c.check(s.validation + s.test < 1.0, "split.test", || {
        format!("validation + test = {:?} must be below 1 so rows remain for training", s.validation + s.test)
    });
    c.check(s.seed <= MAX_SEED, "split.seed", || out_of_toml_range(s.seed));
    c.hint(
        s.column.is_none() || s.group.is_none(),
        "split.group",
        || "cannot be combined with split.column".into(),
        "a given split column already decides where every row goes; keep groups together in that column",
    );
    for (key, name) in [("split.column", &s.column), ("split.group", &s.group)] {
        if let Some(name) = name {
            c.check(!name.trim().is_empty(), key, || "must name a column".into());
            c.check(*name != m.data.target, key, || format!("names the target column `{name}`"));
            c.check(!m.data.features.contains(name), key, || {
                format!("`{name}` is also listed in data.features; a split column is never a feature")
            });
        }
    }
    let labels =
        [("split.labels.train", &s.labels.train), ("split.labels.validation", &s.labels.validation), ("split.labels.test", &s.labels.test)];
    for (key, list) in labels {
        c.check(!list.is_empty(), key, || "must list at least one value".into());
        for (other_key, other) in labels {
            if other_key > key {
                if let Some(shared) = list.iter().find(|l| other.contains(l)) {
                    c.check(false, other_key, || format!("`{shared}` is also listed in {key}"));
                }
            }
        }
    }
    c.check(s.labels.is_default() || s.column.is_some(), "split.labels", || "only applies with split.column".into());

    c.0.extend(validate_run_settings(m.data.task, &m.model, &m.training));

    if !m.selection.metric.is_empty() && registry::direction(m.data.task, &m.selection.metric).is_none() {
        let names = registry::names(m.data.task);
        let hint = super::locate::nearest(&m.selection.metric, names.iter().copied())
            .map(|n| format!("did you mean `{n}`?"))
            .unwrap_or_else(|| format!("one of {}", names.join(", ")));
        c.0.push(Problem {
            key: KeyPath::parse_dotted("selection.metric"),
            index: None,
            message: format!("`{}` is not a {} metric", m.selection.metric, m.data.task.as_str()),
            hint: Some(hint),
        });
    }
    c.check(m.selection.bootstrap <= 100_000, "selection.bootstrap", || format!("must be at most 100000, got {}", m.selection.bootstrap));

    if let Some(i) = m.sweep.seeds.iter().position(|&s| s > MAX_SEED) {
        c.0.push(Problem {
            key: KeyPath::parse_dotted("sweep.seeds"),
            index: Some(i),
            message: out_of_toml_range(m.sweep.seeds[i]),
            hint: None,
        });
    }
    c.check(!m.sweep.seeds.is_empty(), "sweep.seeds", || "must list at least one seed: the plan would have no runs".into());
    let mut seen = std::collections::BTreeSet::new();
    if let Some(i) = m.sweep.seeds.iter().position(|s| !seen.insert(*s)) {
        c.0.push(Problem {
            key: KeyPath::parse_dotted("sweep.seeds"),
            index: Some(i),
            message: format!("seed {} is listed twice", m.sweep.seeds[i]),
            hint: None,
        });
    }
    c.check(m.sweep.max_runs >= 1, "sweep.max_runs", || "must be at least 1".into());
    c.check(!m.selection.ensemble || m.sweep.seeds.len() >= 2, "selection.ensemble", || {
        format!("averages the selected configuration's seeds, and sweep.seeds lists {}: list at least two", m.sweep.seeds.len())
    });
    if let Some(d) = &m.decision {
        validate_decision(&mut c, m.data.task, d);
    }
    if let Some(cal) = &m.calibration {
        validate_calibration(&mut c, m.data.task, cal);
    }
    if let Some(f) = &m.fairness {
        validate_fairness(&mut c, &m.data.group_columns, f);
    }
    if let Some(a) = &m.analysis {
        c.check((2..=1000).contains(&a.permutation_repeats), "analysis.permutation_repeats", || {
            format!("must be from 2 to 1000 (an interval needs repeats), got {}", a.permutation_repeats)
        });
        if let Some(n) = a.curve_features {
            c.check((1..=50).contains(&n), "analysis.curve_features", || format!("must be from 1 to 50, got {n}"));
        }
        if let Some(n) = a.reference_rows {
            c.check((1..=1_000_000).contains(&n), "analysis.reference_rows", || format!("must be from 1 to 1000000, got {n}"));
        }
        if let Some(n) = a.integration_steps {
            c.check((4..=4096).contains(&n) && n % 2 == 0, "analysis.integration_steps", || {
                format!("must be an even number from 4 to 4096 (the error estimate uses every other point), got {n}")
            });
        }
        for name in &a.sensitive {
            c.check(!name.trim().is_empty(), "analysis.sensitive", || "names a feature; an empty name was given".into());
        }
    }
    let replaces = &m.experiment.replaces;
    c.check(
        replaces.is_empty() || ((16..=64).contains(&replaces.len()) && replaces.bytes().all(|b| b.is_ascii_hexdigit())),
        "experiment.replaces",
        || format!("must be the experiment fingerprint of the replaced model (16 to 64 hexadecimal digits), got {replaces:?}"),
    );
    if let Some(mon) = &m.monitoring {
        let (watch, act, alpha) = (mon.psi_watch(), mon.psi_act(), mon.alpha());
        c.check(watch > 0.0 && watch.is_finite(), "monitoring.psi_watch", || format!("must be a positive number, got {watch}"));
        c.check(act > watch && act.is_finite(), "monitoring.psi_act", || {
            format!("must be larger than monitoring.psi_watch ({watch}), got {act}")
        });
        c.check(alpha > 0.0 && alpha < 0.5, "monitoring.alpha", || format!("must be in (0, 0.5), got {alpha}"));
    }
    for (feature, text) in m.reasons.iter().flatten() {
        c.check(!text.trim().is_empty(), &format!("reasons.{feature}"), || "must be a reason text; it is empty".into());
    }
    c.0
}

/// `[fairness]`: a positive minimum group size, a gap in (0, 1), intersections of two distinct
/// group columns.
fn validate_fairness(c: &mut Collector, group_columns: &[String], f: &FairnessSpec) {
    c.check(f.minimum_group_rows >= 1, "fairness.minimum_group_rows", || "must be at least 1".into());
    c.check(f.rate_gap > 0.0 && f.rate_gap < 1.0, "fairness.rate_gap", || format!("must be in (0, 1), got {:?}", f.rate_gap));
    for pair in &f.intersections {
        c.check(pair.len() == 2 && pair[0] != pair[1], "fairness.intersections", || {
            format!("each entry names two different group columns, got {pair:?}")
        });
        for name in pair {
            c.check(group_columns.contains(name), "fairness.intersections", || {
                format!("`{name}` is not one of data.group_columns ({group_columns:?})")
            });
        }
    }
}

/// `[calibration]`: a method for classifiers (binary-only maps on binary tasks), a coverage in
/// (0, 1) for regression.
fn validate_calibration(c: &mut Collector, task: Task, cal: &CalibrationSpec) {
    use crate::calibrate::CalibrationMethod;
    let regression = task == Task::Regression;
    c.check(!(regression && cal.method != CalibrationMethod::None), "calibration.method", || {
        "applies to classifiers; a regression model gets a conformal prediction interval (calibration.coverage)".into()
    });
    c.check(regression || task == Task::Binary || cal.method.applies_to(3), "calibration.method", || {
        format!("\"{}\" applies to binary models only; use \"temperature\" for a multiclass model", cal.method.as_str())
    });
    if let Some(coverage) = cal.coverage {
        c.check(regression, "calibration.coverage", || {
            format!("applies to regression (this task is {}): it is the coverage of a prediction interval", task.as_str())
        });
        c.check(coverage > 0.0 && coverage < 1.0, "calibration.coverage", || format!("must be in (0, 1), got {coverage:?}"));
    }
    c.check(!(regression && cal.per_class_reliability), "calibration.per_class_reliability", || "applies to classifiers".into());
}

/// The declared decision: binary tasks only, each rule with exactly the keys it uses.
fn validate_decision(c: &mut Collector, task: Task, d: &DecisionSpec) {
    c.check(task == Task::Binary, "decision", || {
        format!("only applies to task = \"binary\" (this task is {}): a threshold decides between two classes", task.as_str())
    });
    let fixed = d.threshold == ThresholdRule::Fixed;
    let cost = d.threshold == ThresholdRule::ExpectedCost;
    match d.fixed_threshold {
        Some(t) => {
            c.check(fixed, "decision.fixed_threshold", || "only applies with threshold = \"fixed\"".into());
            c.check(t > 0.0 && t < 1.0, "decision.fixed_threshold", || format!("must be in (0, 1), got {t:?}"));
        }
        None => c.check(!fixed, "decision.threshold", || "\"fixed\" needs decision.fixed_threshold".into()),
    }
    for (key, value) in [("decision.cost_false_positive", d.cost_false_positive), ("decision.cost_false_negative", d.cost_false_negative)] {
        match value {
            Some(v) => {
                c.check(cost, key, || "only applies with threshold = \"expected_cost\"".into());
                c.check(v.is_finite() && v > 0.0, key, || format!("must be a positive number, got {v:?}"));
            }
            None => c.check(!cost, "decision.threshold", || format!("\"expected_cost\" needs {key}")),
        }
    }
    if let Some(f) = &d.favourable {
        c.check(!f.trim().is_empty(), "decision.favourable", || "must name one of the target's two values".into());
    }
}

/// The largest seed a manifest may hold: TOML integers are 64-bit signed (TOML 1.0, "Integer"),
/// so a larger value would not survive another TOML tool reading the manifest.
const MAX_SEED: u64 = i64::MAX as u64;

fn out_of_toml_range(seed: u64) -> String {
    format!("seed {seed} is outside TOML's integer range: seeds go from 0 to {MAX_SEED} (2^63 - 1)")
}
