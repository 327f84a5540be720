//! A batch's monitoring record: `monitoring/batch-<first 16 hex digits of the batch's SHA-256>/`
//! beside the evidence, sealed by its own `contents.sha256` (`store::attached`), holding
//! `report.json`, its markdown reading `report.md`, `psi-trend.svg` (every recorded batch's
//! stability indices in the order recorded) and `recorded.json` (when, by which build, from which
//! file name). The markdown and the figure are drawn from the reports alone.

use serde::{Deserialize, Serialize};
use std::fmt::Write;

use super::report::{MonitorReport, PopulationCheck};
use crate::card::plots::{Chart, Series};
use crate::format::{fixed, sig};
use crate::text::{markdown_cell_text, markdown_line};

pub(crate) const REPORT: &str = "report.json";
pub(crate) const READING: &str = "report.md";
pub(crate) const TREND: &str = "psi-trend.svg";
pub(crate) const RECORDED: &str = "recorded.json";

/// When and by what a record was written: outside the report, which must reproduce.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Recorded {
    pub recorded_at: String,
    pub tool_version: String,
    /// The batch file's name as given (no folder: the record must read the same in every checkout).
    pub batch_file: String,
}

/// The record folder's name for a batch.
pub(crate) fn record_name(batch_sha256: &str) -> String {
    format!("batch-{}", &batch_sha256[..16.min(batch_sha256.len())])
}

/// Features drawn in the trend: the score and the columns with the largest index in any batch.
const TREND_COLUMNS: usize = 7;

/// PSI per recorded batch, oldest first: the score, the features that moved most, and the two
/// thresholds as dashed lines.
pub(crate) fn trend_svg(history: &[(Recorded, MonitorReport)]) -> String {
    let Some((_, latest)) = history.last() else { return String::new() };
    let mut columns: Vec<(String, f64)> = latest
        .features
        .iter()
        .map(|f| {
            let peak = history
                .iter()
                .filter_map(|(_, r)| r.features.iter().find(|g| g.column == f.column))
                .map(|g| g.stability.psi)
                .fold(0.0, f64::max);
            (f.column.clone(), peak)
        })
        .collect();
    columns.sort_by(|a, b| b.1.total_cmp(&a.1).then_with(|| a.0.cmp(&b.0)));
    columns.truncate(TREND_COLUMNS);
    let points = |pick: &dyn Fn(&MonitorReport) -> Option<f64>| -> Vec<(f64, f64)> {
        history.iter().enumerate().filter_map(|(i, (_, r))| pick(r).map(|v| (i as f64, v))).collect()
    };
    let mut series = vec![Series {
        name: "score".into(),
        points: points(&|r| Some(r.score.stability.psi)),
        errors: None,
        dashed: false,
        colour: 0,
        marks: None,
        background: false,
    }];
    for (i, (name, _)) in columns.iter().enumerate() {
        series.push(Series {
            name: name.clone(),
            points: points(&|r| r.features.iter().find(|f| f.column == *name).map(|f| f.stability.psi)),
            errors: None,
            dashed: false,
            colour: i + 1,
            marks: None,
            background: false,
        });
    }
    let t = latest.thresholds;
    for (label, value) in [("watch", t.psi_watch), ("act", t.psi_act)] {
        series.push(Series {
            name: format!("{label} at PSI {value}"),
            points: (0..history.len()).map(|i| (i as f64, value)).collect(),
            errors: None,
            dashed: true,
            colour: 7,
            marks: None,
            background: false,
        });
    }
    Chart {
        title: "Population stability index per batch, in the order recorded".into(),
        x_label: "batch (recorded date)".into(),
        y_label: "PSI".into(),
        series,
        x_categories: Some(history.iter().map(|(r, _)| r.recorded_at.get(..10).unwrap_or(&r.recorded_at).to_string()).collect()),
        diagonal: false,
        fixed_unit_axes: false,
    }
    .render()
}

fn share(x: f64) -> String {
    format!("{}%", fixed(100.0 * x, 1))
}

fn population_row(out: &mut String, p: &PopulationCheck) {
    let extra = match (p.out_of_range_share, p.unseen_share) {
        (Some(o), _) => format!("{} outside the training range", share(o)),
        (_, Some(u)) => format!("{} unseen levels", share(u)),
        _ => "-".into(),
    };
    let _ = writeln!(
        out,
        "| {} | {} | {} | {} | {} → {} | {} | **{}** |",
        markdown_cell_text(&p.column),
        sig(p.stability.psi, 3),
        sig(p.stability.chi_square, 4),
        sig(p.stability.p_value, 3),
        share(p.missing_share[0]),
        share(p.missing_share[1]),
        extra,
        p.verdict.status.as_str()
    );
}

/// The markdown reading of a report.
pub(crate) fn markdown(report: &MonitorReport, recorded: &Recorded) -> String {
    let mut out = String::new();
    let t = report.thresholds;
    let _ = writeln!(out, "# Monitoring record: {}\n", markdown_line(&report.experiment));
    let _ = writeln!(out, "**Overall: {}.** {}\n", report.overall.status.as_str(), markdown_line(&report.overall.reason));
    let _ = writeln!(
        out,
        "- Batch: `{}`, {} rows, SHA-256 `{}`\n- Model: experiment `{}`, results digest `{}`\n- Recorded {} by tabcard {}\n",
        markdown_line(&recorded.batch_file).replace('`', "'"),
        report.rows,
        report.batch_sha256,
        report.fingerprint,
        report.results_digest,
        markdown_line(&recorded.recorded_at),
        markdown_line(&recorded.tool_version)
    );
    let _ = writeln!(out, "## Populations\n");
    let _ = writeln!(
        out,
        "Each column's batch counts over its reference bins against the reference counts. Numbers: edges at the deciles of the training values, `numpy.quantile(values, [0.1, ..., 0.9], method=\"linear\")`, tied edges merged, bins closed on the right (the first from minus infinity, the last to plus infinity), then a missing bin. Categories: one bin per training level, then an unseen bin and a missing bin. The score is binned on the test split's outputs. The population stability index is PSI = Σ (a − e)·ln(a / e) over the bins; bins empty on both sides are dropped and 0.5 is added to every remaining count on both sides before shares are taken. Beside it the p-value of the chi-square test of the 2 × B table of counts (no continuity correction), because PSI grows with the number of bins and shrinks with the sample size. A column reads *watch* at PSI {} and *act* at PSI {} (common practice), each only when the p-value is below {} (our choice).\n",
        t.psi_watch,
        t.psi_act,
        t.alpha
    );
    let _ = writeln!(out, "| column | PSI | chi-square | p-value | missing (reference → batch) | new values | status |");
    let _ = writeln!(out, "| --- | --- | --- | --- | --- | --- | --- |");
    population_row(&mut out, &report.score);
    for f in &report.features {
        population_row(&mut out, f);
    }
    let _ = writeln!(out);
    if let Some(o) = &report.outcomes {
        let _ = writeln!(out, "## Outcomes\n");
        let _ = writeln!(
            out,
            "{} labelled rows ({} without a label left out). Intervals: 95% percentile bootstrap, {} resamples, seed {}; the test interval is the card's.\n",
            o.rows, o.unlabelled, o.resamples, o.bootstrap_seed
        );
        let _ = writeln!(out, "| metric | batch | test split | status |");
        let _ = writeln!(out, "| --- | --- | --- | --- |");
        for m in &o.metrics {
            let interval =
                |i: &crate::metrics::bootstrap::Interval| format!("{} [{}, {}]", sig(i.estimate, 4), sig(i.lower, 4), sig(i.upper, 4));
            let _ = writeln!(
                out,
                "| {} | {} | {} | **{}** |",
                m.metric,
                interval(&m.batch),
                m.test.as_ref().map(interval).unwrap_or_else(|| "-".into()),
                m.verdict.status.as_str()
            );
        }
        let _ = writeln!(
            out,
            "\nCalibration in the large: observed minus predicted on the batch against the same on the test split (the change's p-value from a normal approximation).\n"
        );
        let _ = writeln!(out, "| rows | batch: predicted → observed | test split: predicted → observed | p-value of the change | status |");
        let _ = writeln!(out, "| --- | --- | --- | --- | --- |");
        for c in &o.calibration {
            let _ = writeln!(
                out,
                "| {} ({}) | {} → {} | {} | {} | **{}** |",
                markdown_cell_text(&c.batch.what),
                c.batch.rows,
                sig(c.batch.mean_predicted, 4),
                sig(c.batch.observed, 4),
                c.test.as_ref().map_or("-".into(), |t| format!("{} → {}", sig(t.mean_predicted, 4), sig(t.observed, 4))),
                sig(c.p_value, 3),
                c.verdict.status.as_str()
            );
        }
        let _ = writeln!(out);
    } else {
        let _ = writeln!(out, "## Outcomes\n\nThe batch holds no target column: performance could not be checked.\n");
    }
    let _ = writeln!(out, "## Checks that set the status\n");
    let flagged: Vec<_> = report.verdicts().into_iter().filter(|v| v.status != super::status::Status::Stable).collect();
    if flagged.is_empty() {
        let _ = writeln!(out, "None: every check reads stable.\n");
    }
    for v in flagged {
        let _ = writeln!(out, "- **{}**: {}", v.status.as_str(), markdown_line(&v.reason));
    }
    let _ = writeln!(
        out,
        "\n![PSI per recorded batch]({TREND})\n\n*Figure: the stability index of the score and of the columns that moved most, per recorded batch, oldest first; dashed: the watch and act thresholds.*\n"
    );
    let _ = writeln!(
        out,
        "A status is a prompt for review, not a decision about the model. Where the model informs credit, insurance or health decisions, what follows a drift or a loss of performance is for the model owner and the reviewers under local regulation and licensed practice."
    );
    out
}
