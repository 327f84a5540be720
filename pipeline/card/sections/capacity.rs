//! The capacity section: architecture, parameters, optimizer, the regularizers and the grid.

use serde::Serialize;

use crate::experiment::plan::PlannedConfig;
use crate::format::sig;
use crate::results::StoredResults;
use crate::store::run::StoredRun;
use crate::text::markdown_safe as md;

use crate::card::cells::{value_text, Row};

/// Capacity and regularization of the selected configuration.
#[derive(Serialize)]
pub(crate) struct Capacity {
    pub(crate) architecture: String,
    pub(crate) activation: String,
    pub(crate) residual: bool,
    pub(crate) batch_norm: bool,
    pub(crate) parameter_count: usize,
    pub(crate) rows_per_parameter: String,
    pub(crate) regularizer_rows: Vec<Row>,
    pub(crate) optimizer: String,
    pub(crate) schedule: String,
    pub(crate) epochs: String,
    pub(crate) grid_rows: Vec<Row>,
    pub(crate) seeds: String,
}

pub(crate) fn capacity(st: &StoredResults, selected_cfg: &PlannedConfig, selected_run: &StoredRun) -> Capacity {
    let (model, training) = (&selected_cfg.config.model, &selected_cfg.config.training);
    let selected_summary = st.selection.selected_summary();
    let regularizer_rows =
        crate::training::regularizers::REGULARIZERS.iter().map(|r| Row::of([r.name.to_string(), (r.setting)(model, training)])).collect();
    let grid_rows = st
        .manifest
        .sweep
        .grid
        .iter()
        .map(|(k, v)| {
            Row::of([
                md(k),
                v.iter().map(value_text).collect::<Vec<_>>().join(", "),
                selected_cfg.overrides.get(k).map(value_text).unwrap_or_default(),
            ])
        })
        .collect();
    let hidden = if model.hidden.is_empty() {
        "no hidden layer".to_string()
    } else {
        format!("hidden widths {}", model.hidden.iter().map(|w| w.to_string()).collect::<Vec<_>>().join(", "))
    };
    let momentum = if training.optimizer == crate::manifest::Optimizer::Sgd {
        format!(", momentum {}{}", sig(training.momentum, 3), if training.nesterov { ", Nesterov" } else { "" })
    } else {
        format!(", betas {} / {}", sig(training.beta1, 4), sig(training.beta2, 4))
    };
    let best_epoch = selected_summary
        .and_then(|s| s.best_epoch.as_ref())
        .map(|s| format!("{} ± {}", sig(s.mean, 3), sig(s.sd, 2)))
        .unwrap_or_else(|| "–".into());
    Capacity {
        architecture: format!(
            "{} features encoded as {} inputs → {hidden} → {} output(s)",
            st.record.features.len(),
            st.preprocessor.width(),
            selected_run.record.head.outputs()
        ),
        activation: model.activation.as_str().into(),
        residual: model.residual,
        batch_norm: model.batch_norm,
        parameter_count: selected_run.record.parameter_count,
        rows_per_parameter: sig(st.record.split_rows[0] as f64 / selected_run.record.parameter_count.max(1) as f64, 3),
        regularizer_rows,
        optimizer: format!(
            "{} (learning rate {}{momentum}, batch size {})",
            training.optimizer.as_str(),
            sig(training.learning_rate, 4),
            training.batch_size
        ),
        schedule: format!("{:?} with {} warm-up epoch(s)", training.schedule, training.warmup_epochs).to_lowercase(),
        epochs: format!("at most {}; best epoch per seed {best_epoch} (mean ± sd)", training.epochs),
        grid_rows,
        seeds: st.manifest.sweep.seeds.iter().map(|s| s.to_string()).collect::<Vec<_>>().join(", "),
    }
}
