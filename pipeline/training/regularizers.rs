//! The regularizers tabcard offers, described once: the name the card gives each, the manifest
//! keys that set it, and how a configuration's setting reads. The card's regularization table
//! iterates this list; the keys come from `manifest/schema.rs`, and the engine implements each in
//! `nn/` (see DEVELOPERS.md, "Adding a regularizer").

use crate::format::sig;
use crate::manifest::{ModelSpec, TrainingSpec};

pub(crate) struct Regularizer {
    /// As the card's table names it.
    pub name: &'static str,
    /// The manifest keys that set it (each one sweepable in `[sweep.grid]`); the unit test below
    /// checks each against the manifest schema, so the list stays true.
    #[cfg_attr(not(test), allow(dead_code))]
    pub keys: &'static [&'static str],
    /// Its setting in one configuration, as the card shows it.
    pub setting: fn(&ModelSpec, &TrainingSpec) -> String,
}

fn on_off(on: bool) -> String {
    if on {
        "on".into()
    } else {
        "off".into()
    }
}

pub(crate) const REGULARIZERS: &[Regularizer] = &[
    Regularizer { name: "weight decay (decoupled)", keys: &["training.weight_decay"], setting: |_, t| sig(t.weight_decay, 4) },
    Regularizer { name: "L2 penalty (coupled)", keys: &["training.l2_penalty"], setting: |_, t| sig(t.l2_penalty, 4) },
    Regularizer { name: "dropout", keys: &["model.dropout"], setting: |m, _| sig(m.dropout, 4) },
    Regularizer { name: "input noise (sd, standardised units)", keys: &["model.input_noise"], setting: |m, _| sig(m.input_noise, 4) },
    Regularizer { name: "batch normalisation", keys: &["model.batch_norm"], setting: |m, _| on_off(m.batch_norm) },
    Regularizer { name: "residual connections", keys: &["model.residual"], setting: |m, _| on_off(m.residual) },
    Regularizer {
        name: "early stopping",
        keys: &["training.early_stopping.enabled", "training.early_stopping.patience", "training.early_stopping.min_delta"],
        setting: |_, t| {
            let e = &t.early_stopping;
            if e.enabled {
                format!("on: patience {} epochs on validation loss, min delta {}; best epoch restored", e.patience, sig(e.min_delta, 3))
            } else {
                "off".into()
            }
        },
    },
    Regularizer {
        name: "gradient clipping",
        keys: &["training.clip_norm"],
        setting: |_, t| if t.clip_norm > 0.0 { format!("global norm {}", sig(t.clip_norm, 3)) } else { "off".into() },
    },
];

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_key_is_a_manifest_key() {
        let defaults = serde_json::json!({ "model": ModelSpec::default(), "training": TrainingSpec::default() });
        for r in REGULARIZERS {
            for key in r.keys {
                let found = key.split('.').try_fold(&defaults, |v, part| v.get(part));
                assert!(found.is_some(), "{} names {key}, which the manifest does not have", r.name);
            }
        }
    }
}
