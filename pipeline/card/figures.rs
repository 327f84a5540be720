//! The card's SVG figures, built from stored results: learning curves of the selected
//! configuration, one chart per grid key, the reliability diagram.

use serde::Serialize;
use std::collections::BTreeMap;

use super::plots::{Chart, Mark, Series};
use crate::error::Result;
use crate::manifest::Manifest;
use crate::metrics::calibration::ReliabilityBin;
use crate::selection::deployed::CALIBRATION_FROM;
use crate::selection::Selection;
use crate::store::run::StoredRun;

#[derive(Serialize)]
pub(crate) struct Figure {
    pub(crate) file: String,
    pub(crate) alt: String,
}

/// Rendered figures: (file name, alt text, SVG).
pub(crate) type Figures = Vec<(String, String, String)>;

pub(crate) fn figure_name(key: &str) -> String {
    let slug: String = key.chars().map(|c| if c.is_ascii_alphanumeric() { c } else { '-' }).collect();
    format!("grid-{slug}.svg")
}

/// Builds the figures: (file name, alt text, svg).
pub(crate) fn figures(manifest: &Manifest, selection: &Selection, selected_runs: &[&StoredRun], layout_version: u32) -> Result<Figures> {
    let mut out = Vec::new();
    let mut series = Vec::new();
    for (colour, r) in selected_runs.iter().enumerate() {
        let h = r.history()?;
        series.push(Series {
            name: format!("seed {} train", r.record.seed),
            points: h.iter().map(|e| (e.epoch as f64, e.train_loss)).collect(),
            errors: None,
            dashed: false,
            colour,
            marks: None,
            background: false,
        });
        series.push(Series {
            name: format!("seed {} validation", r.record.seed),
            points: h.iter().map(|e| (e.epoch as f64, e.validation_loss)).collect(),
            errors: None,
            dashed: true,
            colour,
            marks: None,
            background: false,
        });
        // The epoch whose weights were kept (early stopping keeps the best validation epoch).
        if let Some(kept) = h.iter().find(|e| e.epoch == r.record.best_epoch) {
            let stop = if r.record.stopped_early { format!(", stopped at {}", r.record.epochs_run) } else { String::new() };
            series.push(Series {
                name: format!("seed {}: kept epoch {}{stop}", r.record.seed, kept.epoch),
                points: vec![(kept.epoch as f64, kept.validation_loss)],
                errors: None,
                dashed: false,
                colour,
                marks: Some(vec![Mark { weight: 0.15, lower: kept.validation_loss, upper: kept.validation_loss, label: "kept".into() }]),
                background: false,
            });
        }
    }
    let chart = Chart {
        title: "Learning curves, selected configuration".into(),
        x_label: "epoch".into(),
        y_label: "loss".into(),
        series,
        x_categories: None,
        diagonal: false,
        fixed_unit_axes: false,
    };
    out.push((
        "learning-curves.svg".into(),
        "training (solid) and validation (dashed) loss per epoch for every seed of the selected configuration; a circle labelled kept marks the epoch whose weights each seed kept (the legend says where early stopping ended a run)".into(),
        chart.render(),
    ));

    let m = &selection.metric;
    for (key, values) in &manifest.sweep.grid {
        let others: Vec<&String> = manifest.sweep.grid.keys().filter(|k| *k != key).collect();
        // Per line of the chart: validation points, their seed sd, training points.
        type Line = (Vec<(f64, f64)>, Vec<f64>, Vec<(f64, f64)>);
        let mut lines: BTreeMap<String, Line> = BTreeMap::new();
        for c in selection.configs.iter().filter(|c| !c.baseline) {
            let Some(v) = c.overrides.get(key) else { continue };
            let Some(x) = values.iter().position(|g| g == v) else { continue };
            let label = if others.is_empty() {
                "network".to_string()
            } else {
                others
                    .iter()
                    .map(|k| {
                        format!("{}={}", k.rsplit('.').next().unwrap_or(k), c.overrides.get(*k).map(|v| v.to_string()).unwrap_or_default())
                    })
                    .collect::<Vec<_>>()
                    .join(" ")
            };
            let entry = lines.entry(label).or_default();
            if let Some(s) = c.validation.get(m) {
                entry.0.push((x as f64, s.mean));
                entry.1.push(s.sd);
            }
            if let Some(s) = c.train.get(m) {
                entry.2.push((x as f64, s.mean));
            }
        }
        let mut series = Vec::new();
        let line_count = lines.len();
        for (colour, (label, (val, sd, train))) in lines.into_iter().enumerate() {
            series.push(Series {
                name: format!("{label} validation"),
                points: val,
                errors: Some(sd),
                dashed: false,
                colour,
                marks: None,
                background: false,
            });
            series.push(Series {
                name: format!("{label} train"),
                points: train,
                errors: None,
                dashed: true,
                colour,
                marks: None,
                background: false,
            });
        }
        // The selected configuration's point, and the linear baseline as a level line.
        if let Some(chosen) = selection.selected_summary() {
            let x = chosen.overrides.get(key).and_then(|v| values.iter().position(|g| g == v));
            if let (Some(x), Some(v)) = (x, chosen.validation.get(m)) {
                series.push(Series {
                    name: "selected configuration".into(),
                    points: vec![(x as f64, v.mean)],
                    errors: None,
                    dashed: false,
                    colour: line_count.min(6),
                    marks: Some(vec![Mark { weight: 0.15, lower: v.mean, upper: v.mean, label: "selected".into() }]),
                    background: false,
                });
            }
        }
        if let Some(base) = selection.configs.iter().find(|c| c.baseline).and_then(|c| c.validation.get(m)) {
            series.push(Series {
                name: "linear baseline, validation".into(),
                points: (0..values.len()).map(|x| (x as f64, base.mean)).collect(),
                errors: None,
                dashed: true,
                colour: 7,
                marks: None,
                background: false,
            });
        }
        let chart = Chart {
            title: format!("{m} across {key}"),
            x_label: key.clone(),
            y_label: m.clone(),
            series,
            x_categories: Some(values.iter().map(|v| v.to_string()).collect()),
            diagonal: false,
            fixed_unit_axes: false,
        };
        out.push((
            figure_name(key),
            format!("validation (solid, mean ± sd across seeds) and training (dashed) {m} for each value of {key}; a circle labelled selected marks the selected configuration, a grey dashed line the linear baseline's validation mean"),
            chart.render(),
        ));
    }
    if let Some(figure) = reliability_figure(selection, layout_version) {
        out.push(figure);
    }
    Ok(out)
}

/// A reliability table as a series: one point per bin, its marker's area by the bin's share of
/// the largest bin's rows, its Wilson interval and its row count drawn.
fn reliability_series(name: &str, table: &[ReliabilityBin], dashed: bool, colour: usize) -> Series {
    let largest = table.iter().map(|b| b.count).max().unwrap_or(1).max(1) as f64;
    Series {
        name: name.into(),
        points: table.iter().map(|b| (b.mean_predicted, b.observed)).collect(),
        errors: None,
        dashed,
        colour,
        background: false,
        marks: Some(
            table
                .iter()
                .map(|b| {
                    let (lower, upper) = b.observed_interval.unwrap_or((b.observed, b.observed));
                    Mark { weight: b.count as f64 / largest, lower, upper, label: format!("n={}", b.count) }
                })
                .collect(),
        ),
    }
}

/// The reliability diagram: layout 5 on, top-label (the bins ECE uses), with the network's own
/// probabilities beside the calibrated ones when a map was fitted; layouts 3 and 4, the
/// positive-class table of binary models.
fn reliability_figure(selection: &Selection, layout_version: u32) -> Option<(String, String, String)> {
    let table = &selection.test.reliability;
    if table.is_empty() {
        return None;
    }
    if layout_version < CALIBRATION_FROM {
        let chart = Chart {
            title: "Reliability diagram, selected run, test split".into(),
            x_label: "mean predicted probability".into(),
            y_label: "observed share of positives".into(),
            series: vec![reliability_series("selected run", table, false, 0)],
            x_categories: None,
            diagonal: true,
            fixed_unit_axes: true,
        };
        return Some(("reliability.svg".into(), "observed share of positives against mean predicted probability in 10 equal-width bins closed on the right; marker area and label: rows; dashed: perfect calibration".into(), chart.render()));
    }
    let mut series = Vec::new();
    if let Some(c) = &selection.calibration {
        series.push(reliability_series("network's own", &c.reliability_before, true, 7));
        series.push(reliability_series(&format!("calibrated ({})", c.map.method().as_str()), table, false, 0));
    } else {
        series.push(reliability_series("selected run", table, false, 0));
    }
    let chart = Chart {
        title: "Reliability diagram (top label), selected run, test split".into(),
        x_label: "mean confidence (largest class probability)".into(),
        y_label: "accuracy (share whose top class is right)".into(),
        series,
        x_categories: None,
        diagonal: true,
        fixed_unit_axes: true,
    };
    Some((
        "reliability.svg".into(),
        "accuracy against mean confidence in the bins ECE uses; marker area and label: rows; vertical line: 95% Wilson interval; dashed: perfect calibration".into(),
        chart.render(),
    ))
}

/// The file name of the `rank`-th curve figure (1-based): the rank keeps names of features that
/// differ only in punctuation apart, and the feature's name, cut to 40 characters, keeps it legible.
pub(crate) fn curve_figure_name(rank: usize, feature: &str) -> String {
    let slug: String = feature.chars().take(40).map(|c| if c.is_ascii_alphanumeric() { c } else { '-' }).collect();
    format!("curve-{rank}-{slug}.svg")
}

/// One figure per curve of `sensitivity.json`: the partial dependence (markers sized by the
/// training rows each grid point stands for, labelled with their count) over pale ICE curves.
pub(crate) fn curve_figures(
    report: &crate::analysis::sensitivity::SensitivityReport,
    task: crate::manifest::Task,
    labels: &[String],
) -> Figures {
    let y_label = match task {
        crate::manifest::Task::Binary => format!("probability of {}", labels.get(1).map(String::as_str).unwrap_or("the positive class")),
        crate::manifest::Task::Multiclass => "class probability".to_string(),
        crate::manifest::Task::Regression => "prediction".to_string(),
    };
    report
        .curves
        .iter()
        .enumerate()
        .map(|(rank, c)| {
            let categorical = c.grid.is_empty();
            let xs: Vec<f64> = if categorical { (0..c.levels.len()).map(|i| i as f64).collect() } else { c.grid.clone() };
            let largest = c.training_rows.iter().copied().max().unwrap_or(1).max(1) as f64;
            let mut series: Vec<Series> = c
                .ice
                .iter()
                .zip(&c.ice_rows)
                .map(|(ys, r)| Series {
                    name: format!("test row {r}"),
                    points: xs.iter().copied().zip(ys.iter().copied()).collect(),
                    errors: None,
                    dashed: false,
                    colour: 7,
                    marks: None,
                    background: true,
                })
                .collect();
            for (i, ys) in c.average.iter().enumerate() {
                let name = if c.average.len() > 1 {
                    format!("mean p({})", labels.get(i).map(String::as_str).unwrap_or("?"))
                } else {
                    "mean over test rows".to_string()
                };
                let marks = (i == 0).then(|| {
                    ys.iter()
                        .zip(&c.training_rows)
                        .map(|(&y, &n)| Mark { weight: n as f64 / largest, lower: y, upper: y, label: format!("n={n}") })
                        .collect()
                });
                series.push(Series {
                    name,
                    points: xs.iter().copied().zip(ys.iter().copied()).collect(),
                    errors: None,
                    dashed: false,
                    colour: i,
                    marks,
                    background: false,
                });
            }
            let chart = Chart {
                title: format!("Partial dependence on {}", c.feature),
                x_label: c.feature.clone(),
                y_label: y_label.clone(),
                series,
                x_categories: categorical.then(|| c.levels.clone()),
                diagonal: false,
                fixed_unit_axes: false,
            };
            (curve_figure_name(rank + 1, &c.feature), format!("partial dependence of the {y_label} on {}", c.feature), chart.render())
        })
        .collect()
}
