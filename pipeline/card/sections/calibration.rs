//! The card's calibration section: for classifiers, what map (if any) recalibrated the
//! probabilities, on which rows, what it changed on the test split, and the top-label
//! reliability table the expected calibration error is computed from; for regression, the
//! prediction interval `predict` writes and how often it covered the test targets.

use serde::Serialize;

use crate::calibrate::CalibrationMap;
use crate::card::cells::Row;
use crate::format::{count, fixed, sig};
use crate::manifest::Task;
use crate::metrics::bootstrap::Interval;
use crate::metrics::calibration::{ece_from_table, ReliabilityBin};
use crate::results::StoredResults;
use crate::selection::deployed::{IntervalReport, CALIBRATION_FROM, CALIBRATION_METRICS};
use crate::text::markdown_safe as md;

/// One reliability table with its title.
#[derive(Serialize)]
pub(crate) struct ReliabilityTable {
    pub(crate) title: String,
    pub(crate) header: Vec<String>,
    pub(crate) rows: Vec<Row>,
}

#[derive(Serialize)]
pub(crate) struct Calibration {
    /// What was fitted, on which rows, and what it means (empty: no section).
    pub(crate) summary: String,
    /// Test figures before and after the map (empty without a map).
    pub(crate) comparison_rows: Vec<Row>,
    pub(crate) tables: Vec<ReliabilityTable>,
}

fn interval_text(i: Option<&Interval>) -> String {
    i.map(|i| format!("{} [{}, {}]", fixed(i.estimate, 4), fixed(i.lower, 4), fixed(i.upper, 4))).unwrap_or_else(|| "–".into())
}

fn map_text(map: &CalibrationMap) -> String {
    match map {
        CalibrationMap::Temperature { temperature, at_bound } => format!(
            "temperature scaling (Guo, Pleiss, Sun & Weinberger 2017): every logit divided by T = {}{}",
            sig(*temperature, 6),
            if *at_bound { ", at the bound of the search [0.01, 100]: the validation rows barely inform it" } else { "" }
        ),
        CalibrationMap::Platt { a, b } => format!(
            "Platt scaling (Platt 1999, with his smoothed targets): p = 1 / (1 + exp(-({} z + {}))) on the logit z",
            sig(*a, 6),
            sig(*b, 6)
        ),
        CalibrationMap::Isotonic { logits, .. } => format!(
            "isotonic regression (Zadrozny & Elkan 2002): a non-decreasing map of the logit through {} fitted points, linear between them and flat beyond",
            logits.len()
        ),
    }
}

fn bin_label(b: &ReliabilityBin) -> String {
    // Closed on the right; the first bin also holds 0.
    format!("{}{}, {}]", if b.lower == 0.0 { "[" } else { "(" }, sig(b.lower, 2), sig(b.upper, 2))
}

/// A layout-5 table: rows, mean confidence, accuracy with its Wilson interval, and the bin's
/// share of the expected calibration error, whose sum the title states.
fn table(title: String, (predicted, observed): (&str, &str), bins: &[ReliabilityBin], rows: usize, with_ece: bool) -> ReliabilityTable {
    let n = rows.max(1) as f64;
    let mut header: Vec<String> = ["bin", "rows", predicted, observed, "95% Wilson interval"].map(String::from).to_vec();
    if with_ece {
        header.push("rows/n x |gap|".into());
    }
    let rows = bins
        .iter()
        .map(|b| {
            let mut cells = vec![bin_label(b), b.count.to_string(), fixed(b.mean_predicted, 4), fixed(b.observed, 4)];
            cells.push(b.observed_interval.map(|(lo, hi)| format!("[{}, {}]", fixed(lo, 4), fixed(hi, 4))).unwrap_or_else(|| "–".into()));
            if with_ece {
                cells.push(fixed((b.count as f64 / n) * (b.observed - b.mean_predicted).abs(), 4));
            }
            Row::of(cells)
        })
        .collect();
    ReliabilityTable { title, header, rows }
}

fn legacy_table(bins: &[ReliabilityBin]) -> ReliabilityTable {
    ReliabilityTable {
        title: "Reliability (selected run, test split; bins of the positive-class probability, closed on the right)".into(),
        header: ["bin", "rows", "mean predicted", "observed share positive"].map(String::from).to_vec(),
        rows: bins.iter().map(|b| Row::of([bin_label(b), b.count.to_string(), fixed(b.mean_predicted, 4), fixed(b.observed, 4)])).collect(),
    }
}

fn interval_summary(i: &IntervalReport, target: &str) -> String {
    let percent = |x: f64| format!("{}%", sig(100.0 * x, 4));
    format!(
        "`predict` writes a {} prediction interval for every row: the prediction ± **{}** (in the units of {target}), a split conformal \
         interval (Lei, G'Sell, Rinaldo, Tibshirani & Wasserman 2018): the k-th smallest of the {} absolute residuals on the {} rows, \
         k = ⌈(n + 1) × {}⌉ = {}. The validation rows also chose the model, so the width is fitted on rows that are not wholly fresh. \
         On the {} test rows, which played no part, it covered {} ({}, 95% Wilson interval [{}, {}]). The guarantee is on average over \
         rows drawn like the training data, not for each row, and not after the population drifts; the interval has one width \
         everywhere, so it is too wide for easy rows and too narrow for hard ones.",
        percent(i.coverage),
        sig(i.half_width, 6),
        i.rows,
        i.fitted_on,
        sig(i.coverage, 4),
        i.k,
        i.test_rows,
        count(i.test_covered, "row", "rows"),
        percent(i.test_coverage),
        percent(i.test_coverage_interval.0),
        percent(i.test_coverage_interval.1),
    )
}

pub(crate) fn calibration(st: &StoredResults) -> Calibration {
    let sel = &st.selection;
    let t = &sel.test;
    let task = st.manifest.data.task;
    let labels = &st.record.class_labels;
    if task == Task::Regression {
        let summary = match &sel.interval {
            Some(i) => interval_summary(i, &md(&st.manifest.data.target)),
            None => String::new(),
        };
        return Calibration { summary, comparison_rows: Vec::new(), tables: Vec::new() };
    }
    if st.layout_version < CALIBRATION_FROM {
        let tables = if t.reliability.is_empty() { Vec::new() } else { vec![legacy_table(&t.reliability)] };
        let summary = if tables.is_empty() {
            String::new()
        } else {
            "This folder was trained before tabcard 0.7: its probabilities are the network's own and its reliability table bins the positive-class probability, while its expected calibration error bins top-label confidence.".into()
        };
        return Calibration { summary, comparison_rows: Vec::new(), tables };
    }
    let summary = match &sel.calibration {
        Some(c) if sel.ensemble.is_some() => format!(
            "Each seed of the ensemble is recalibrated by its own {} map, fitted on the {} {} rows after training (no trained weight moved), and \
             the ensemble averages the calibrated probabilities; the selected run's map is {}. Those rows also chose the configuration, so \
             the fit is slightly optimistic; the test split, which played no part, judges it below. `predict`, the deployed threshold and \
             every test figure on this card use the calibrated probabilities.",
            c.map.method().as_str(),
            c.rows,
            c.fitted_on,
            map_text(&c.map)
        ),
        Some(c) => format!(
            "The probabilities are recalibrated by {}, fitted on the {} {} rows after training (no trained weight moved). Those rows also \
             chose the configuration and the seed, so the fit is slightly optimistic; the test split, which played no part, judges it \
             below. `predict`, the deployed threshold and every test figure on this card use the calibrated probabilities.",
            map_text(&c.map),
            c.rows,
            c.fitted_on
        ),
        None => "The probabilities are the network's own: no calibration map was fitted (`[calibration] method = \"none\"`). A decision \
                 that uses the probability itself (a price, an expected cost, a limit), not only its order, needs it calibrated; the \
                 table shows how far it is."
            .into(),
    };
    let comparison_rows = match &sel.calibration {
        Some(c) => CALIBRATION_METRICS
            .iter()
            .map(|m| Row::of([m.to_string(), interval_text(c.before.get(*m)), interval_text(t.intervals.get(*m))]))
            .collect(),
        None => Vec::new(),
    };
    let ece = ece_from_table(&t.reliability, t.rows);
    let mut tables = vec![table(
        format!(
            "Reliability (selected run, test split; top-label confidence, the largest class probability, in 10 equal-width bins closed \
             on the right). These are the bins and values the expected calibration error is computed from: the last column sums to \
             {}, the test ECE",
            fixed(ece, 4)
        ),
        ("mean confidence", "accuracy"),
        &t.reliability,
        t.rows,
        true,
    )];
    for c in &t.reliability_per_class {
        let label = labels.get(c.class).map(|l| md(l)).unwrap_or_else(|| c.class.to_string());
        tables.push(table(
            format!("Reliability of class {label} against the rest (probability of {label}; observed: share of rows of {label})"),
            ("mean predicted", "observed share"),
            &c.bins,
            t.rows,
            false,
        ));
    }
    Calibration { summary, comparison_rows, tables }
}
