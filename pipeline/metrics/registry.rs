//! Which metrics exist for each task, which way is better, and the default selection metric.

use crate::manifest::Task;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    Maximise,
    Minimise,
}

const BINARY: &[(&str, Direction)] = &[
    ("roc_auc", Direction::Maximise),
    ("average_precision", Direction::Maximise),
    ("accuracy", Direction::Maximise),
    ("balanced_accuracy", Direction::Maximise),
    ("log_loss", Direction::Minimise),
    ("brier", Direction::Minimise),
    ("ece", Direction::Minimise),
];

const MULTICLASS: &[(&str, Direction)] = &[
    ("log_loss", Direction::Minimise),
    ("accuracy", Direction::Maximise),
    ("balanced_accuracy", Direction::Maximise),
    ("roc_auc", Direction::Maximise),
    ("brier", Direction::Minimise),
    ("ece", Direction::Minimise),
];

const REGRESSION: &[(&str, Direction)] = &[
    ("rmse", Direction::Minimise),
    ("mae", Direction::Minimise),
    ("r2", Direction::Maximise),
];

fn table(task: Task) -> &'static [(&'static str, Direction)] {
    match task {
        Task::Binary => BINARY,
        Task::Multiclass => MULTICLASS,
        Task::Regression => REGRESSION,
    }
}

/// Metric names for a task, the default selection metric first.
pub fn names(task: Task) -> Vec<&'static str> {
    table(task).iter().map(|(n, _)| *n).collect()
}

pub fn direction(task: Task, name: &str) -> Option<Direction> {
    table(task).iter().find(|(n, _)| *n == name).map(|(_, d)| *d)
}

pub fn default_selection_metric(task: Task) -> &'static str {
    table(task)[0].0
}

/// True when `a` is strictly better than `b` in `direction`.
pub fn better(direction: Direction, a: f64, b: f64) -> bool {
    match direction {
        Direction::Maximise => a > b,
        Direction::Minimise => a < b,
    }
}
