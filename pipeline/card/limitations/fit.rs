//! Limitation rules about the fit and the selection: capacity against rows, seed spread, the
//! train-validation gap, a selection at the grid's edge or within noise, failed runs.

use super::finding::*;
use crate::card::evidence::Evidence;
use crate::format::sig;

/// Few rows per parameter matter when the capacity shows: a regularized or early-stopped
/// network with more parameters than rows may generalise well (most small open tables), so the
/// rule fires only when the train-validation gap it warns about is visible too, at half the
/// large-gap limit.
pub(super) fn few_rows_per_parameter(e: &Evidence) -> Option<Limitation> {
    let ratio = e.train_rows as f64 / e.parameter_count.max(1) as f64;
    let gap = e.gap?;
    let (scale, what) = &e.scale;
    let visible = FEW_ROWS_GAP_SHARE * scale;
    (ratio < MIN_ROWS_PER_PARAMETER && gap > visible).then(|| {
        Limitation::new(
            "few_rows_per_parameter",
            "Few training rows per parameter, and it shows",
            format!(
                "{} training rows for {} parameters ({} rows per parameter), and {} is worse on validation than on training by {}",
                e.train_rows,
                e.parameter_count,
                sig(ratio, 3),
                e.metric,
                sig(gap, 3)
            ),
            format!(
                "at least {MIN_ROWS_PER_PARAMETER} rows per parameter, or a gap at most {}% of {what} ({}) (common practice)",
                100.0 * FEW_ROWS_GAP_SHARE,
                sig(visible, 3)
            ),
        )
    })
}

pub(super) fn large_seed_spread(e: &Evidence) -> Option<Limitation> {
    let (mean, sd) = e.selected?;
    let (scale, what) = &e.scale;
    (sd > SEED_SD_SHARE * scale).then(|| {
        Limitation::new(
            "large_seed_spread",
            "Results vary across seeds",
            format!(
                "validation {} of the selected configuration: {} ± {} (standard deviation across seeds)",
                e.metric,
                sig(mean, 4),
                sig(sd, 2)
            ),
            format!("standard deviation at most {}% of {what} ({}) (common practice)", 100.0 * SEED_SD_SHARE, sig(*scale, 3)),
        )
    })
}

pub(super) fn large_generalisation_gap(e: &Evidence) -> Option<Limitation> {
    let gap = e.gap?;
    let (scale, what) = &e.scale;
    (gap > GAP_SHARE * scale).then(|| {
        Limitation::new(
            "large_generalisation_gap",
            "Training and validation performance differ",
            format!(
                "{} is worse on validation rows than on training rows by {} (mean across seeds): a sign of overfitting",
                e.metric,
                sig(gap, 3)
            ),
            format!("gap at most {}% of {what} ({}) (common practice)", 100.0 * GAP_SHARE, sig(*scale, 3)),
        )
    })
}

pub(super) fn selection_at_grid_edge(e: &Evidence) -> Option<Limitation> {
    let edges: Vec<String> = e
        .grid
        .iter()
        .filter(|(_, _, position, count)| *count >= GRID_EDGE_MIN_VALUES && (*position == 0 || *position + 1 == *count))
        .map(|(k, v, position, count)| {
            format!("{k} = {v} is the {} of {count} values searched", if *position == 0 { "smallest" } else { "largest" })
        })
        .collect();
    (!edges.is_empty()).then(|| Limitation::new(
        "selection_at_grid_edge",
        "Selected setting at the end of its searched range",
        format!("{}; the validation metric may keep improving beyond the range, so the range may need widening", edges.join("; ")),
        format!("for keys searched over at least {GRID_EDGE_MIN_VALUES} ordered values, the selected value strictly inside (common practice)"),
    ))
}

pub(super) fn selection_within_noise(e: &Evidence) -> Option<Limitation> {
    let (mean, _) = e.selected?;
    let simpler: Vec<String> =
        e.simpler_within_noise.iter().map(|(label, params, m)| format!("{label} ({params} parameters, {})", sig(*m, 4))).collect();
    (!simpler.is_empty()).then(|| Limitation::new(
        "selection_within_noise",
        "A simpler configuration does as well within seed noise",
        format!("the selected configuration ({} parameters, validation {} {}) is within one standard error of {}; consider [selection] rule = \"one_standard_error\"", e.parameter_count, e.metric, sig(mean, 4), simpler.join(", ")),
        "no configuration with fewer parameters within one standard error of the selected mean (the one-standard-error rule: Breiman et al. 1984, section 3.4.3; common practice)".into(),
    ))
}

pub(super) fn failed_runs(e: &Evidence) -> Option<Limitation> {
    (e.failed_runs > 0).then(|| {
        Limitation::new(
            "failed_runs",
            "Some runs failed or diverged",
            format!("{} run(s) did not complete; their configurations are summarised over fewer seeds", e.failed_runs),
            "every planned run completes".into(),
        )
    })
}
