//! One pass over a batch of new rows: its schema checked against the stored one, then its feature
//! (and target) columns read a chunk of rows at a time, every feature counted into its reference
//! bins, each chunk scored by the deployed model and its score counted too. Only a chunk's
//! columns and matrix are held at once, plus, when the batch holds outcomes, each row's outputs
//! and label.

use std::path::Path;

use crate::analysis::profile::{scores, tally_scores, Binner, Bins, ReferenceProfile};
use crate::data::parquet::ParquetSource;
use crate::data::prep::Preprocessor;
use crate::data::summary::DataSummary;
use crate::data::table::Table;
use crate::error::{Error, Result};
use crate::manifest::Task;
use crate::selection::serving::Deployed;
use crate::text::terminal_safe;
use crate::training::Labels;

/// What the batch's outcomes are compared with: each labelled row's deployed outputs (k per row)
/// and its label.
pub(crate) struct Observed {
    pub outputs: Vec<f64>,
    pub labels: Labels,
    /// Rows whose target is missing (left out of the outcomes).
    pub unlabelled: usize,
}

/// What one pass over the batch counts.
pub(crate) struct Tally {
    pub rows: usize,
    /// Per feature of the profile, rows per bin.
    pub features: Vec<Vec<u64>>,
    /// Per feature, rows outside the training range (numbers; 0 for categories).
    pub out_of_range: Vec<u64>,
    pub score: Vec<u64>,
    pub observed: Option<Observed>,
}

/// What the batch's target is read as.
pub(crate) enum TargetKind<'a> {
    /// Classification: the training labels, in class order.
    Classes(&'a [String]),
    Values,
}

/// Every stored feature must be present with the type it was trained on, and the batch must have
/// rows.
pub(crate) fn check_schema(source: &ParquetSource, profile: &ReferenceProfile, summary: &DataSummary) -> Result<()> {
    let path = source.path();
    let names: std::collections::HashSet<String> = source.names().into_iter().collect();
    let missing: Vec<&str> = profile.features.iter().map(|f| f.name.as_str()).filter(|n| !names.contains(*n)).collect();
    if let Some(first) = missing.first() {
        return Err(Error::data(
            path,
            Some(first),
            format!(
                "is missing: the model was trained with it (missing: {})",
                missing.iter().map(|m| format!("`{}`", terminal_safe(m))).collect::<Vec<_>>().join(", ")
            ),
        ));
    }
    for f in &profile.features {
        let trained = summary.columns.iter().find(|c| c.name == f.name).map(|c| c.kind.as_str()).unwrap_or("");
        let text = source.is_text(&f.name);
        let ok = match f.bins {
            Bins::Numeric { .. } => !text,
            Bins::Levels { .. } => (trained == "string") == text,
        };
        if !ok {
            let now = if text { "strings" } else { "numbers" };
            return Err(Error::data(path, Some(&f.name), format!("holds {now} but the model was trained on a {trained} column")));
        }
    }
    if source.rows() == 0 {
        return Err(Error::data(path, None, "has no rows: there is nothing to monitor"));
    }
    Ok(())
}

/// Reads, counts and scores the batch. `target`: the target column and how to read it, when the
/// batch's outcomes are to be compared.
pub(crate) fn tally(
    source: &ParquetSource,
    profile: &ReferenceProfile,
    preprocessor: &Preprocessor,
    model: &mut Deployed,
    task: Task,
    target: Option<(&str, TargetKind)>,
) -> Result<Tally> {
    let path = source.path().to_path_buf();
    let k = model.head().values_per_row();
    let mut names: Vec<&str> = profile.features.iter().map(|f| f.name.as_str()).collect();
    if let Some((t, _)) = &target {
        if !names.contains(t) {
            names.push(t);
        }
    }
    let binners: Vec<Binner> = profile.features.iter().map(|f| Binner::new(&f.bins)).collect();
    let mut features: Vec<Vec<u64>> = profile.features.iter().map(|f| vec![0; f.bins.len()]).collect();
    let mut out_of_range = vec![0u64; profile.features.len()];
    let mut score = vec![0u64; profile.score.bins.len()];
    let mut observed = target.as_ref().map(|_| Observed {
        outputs: Vec::new(),
        labels: match &target {
            Some((_, TargetKind::Classes(labels))) => Labels::Classes { rows: Vec::new(), classes: labels.len() },
            _ => Labels::Values(Vec::new()),
        },
        unlabelled: 0,
    });
    let mut rows = 0usize;
    source.for_each_chunk(&names, &mut |first, chunk: &Table| {
        for (f, profiled) in profile.features.iter().enumerate() {
            let col = chunk.column(&profiled.name).ok_or_else(|| Error::data(&path, Some(&profiled.name), "is not in the file"))?;
            if let Bins::Numeric { min, max, .. } = profiled.bins {
                for r in 0..col.len() {
                    match col.number(r) {
                        Some(v) if !v.is_finite() => {
                            return Err(Error::data(
                                &path,
                                Some(&profiled.name),
                                format!("row {} holds {v}; tabcard needs finite numbers", first + r),
                            ))
                        }
                        Some(v) if v < min || v > max => out_of_range[f] += 1,
                        _ => {}
                    }
                }
            }
            binners[f].tally(col, &mut features[f]);
        }
        let all: Vec<usize> = (0..chunk.rows).collect();
        let (x, _) = preprocessor.transform(chunk, &all, &path)?;
        let outputs = model.score(&x)?;
        tally_scores(task, &profile.score.bins, &scores(task, &outputs, k), &mut score);
        if let (Some(obs), Some((name, kind))) = (observed.as_mut(), target.as_ref()) {
            let col = chunk.column(name).ok_or_else(|| Error::data(&path, Some(name), "is not in the file"))?;
            for r in 0..chunk.rows {
                match (kind, &mut obs.labels) {
                    (TargetKind::Classes(labels), Labels::Classes { rows, .. }) => match col.label(r) {
                        None => obs.unlabelled += 1,
                        Some(l) => {
                            let class = labels.iter().position(|x| *x == l).ok_or_else(|| {
                                Error::data(
                                    &path,
                                    Some(name),
                                    format!(
                                        "row {} holds the class `{}`, which the model was not trained on",
                                        first + r,
                                        terminal_safe(&l)
                                    ),
                                )
                            })?;
                            rows.push(class);
                            obs.outputs.extend_from_slice(&outputs[r * k..(r + 1) * k]);
                        }
                    },
                    (TargetKind::Values, Labels::Values(values)) => match col.number(r) {
                        None => obs.unlabelled += 1,
                        Some(v) if !v.is_finite() => {
                            return Err(Error::data(
                                &path,
                                Some(name),
                                format!("row {} holds {v}; tabcard needs finite numbers", first + r),
                            ))
                        }
                        Some(v) => {
                            values.push(v);
                            obs.outputs.push(outputs[r]);
                        }
                    },
                    _ => return Err(Error::Internal("the target's kind and its labels disagree".into())),
                }
            }
        }
        rows += chunk.rows;
        Ok(())
    })?;
    Ok(Tally { rows, features, out_of_range, score, observed })
}

/// The stored reference profile of a folder, or an error saying which layout first stores one.
pub(crate) fn require_profile(profile: Option<ReferenceProfile>, folder: &Path, layout_version: u32) -> Result<ReferenceProfile> {
    profile.ok_or_else(|| {
        Error::store(
            folder,
            format!(
                "holds no profile.json (results layout {layout_version}); monitoring needs the reference population stored from layout {} on: retrain the experiment with this tabcard",
                crate::analysis::profile::PROFILE_FROM
            ),
        )
    })
}
