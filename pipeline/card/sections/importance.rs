//! The card's section on what drives the model: permutation importance of each raw feature on
//! the test rows, ranked, with intervals and the features not shown to matter marked.

use serde::Serialize;

use crate::card::cells::Row;
use crate::format::sig;
use crate::results::StoredResults;
use crate::text::markdown_safe as md;

#[derive(Serialize)]
pub(crate) struct Importance {
    /// Empty: no section (a folder before layout 5).
    pub(crate) summary: String,
    pub(crate) rows: Vec<Row>,
}

pub(crate) fn importance(st: &StoredResults) -> Importance {
    let Some(r) = &st.importance else { return Importance { summary: String::new(), rows: Vec::new() } };
    let shown = r.features.iter().filter(|f| f.shown_to_matter).count();
    let summary = format!(
        "Permutation importance (Breiman 2001; Fisher, Rudin & Dominici 2019): each feature's values, all its network inputs together, are shuffled across {} and the deployed model's test {} (here {}) is measured again. The loss is how much worse it gets (positive: worse), the mean of {} permutations; its 95% interval comes from the same permutations scored on bootstrap resamples of those rows. {} of {} features are shown to matter (interval above 0). A feature can look unimportant when another carries the same information (they share the loss), and importance says how much the model uses a feature, not whether the feature causes the outcome.",
        super::sensitivity::rows_note(r.sampled_rows, st.selection.test.rows),
        md(&r.metric),
        sig(r.test_value, 4),
        r.repeats,
        shown,
        r.features.len()
    );
    let rows = r
        .features
        .iter()
        .enumerate()
        .map(|(i, f)| {
            Row::of([
                (i + 1).to_string(),
                md(&f.feature),
                f.inputs.to_string(),
                format!("{} [{}, {}]", sig(f.loss.value, 3), sig(f.loss.lower, 3), sig(f.loss.upper, 3)),
                if f.shown_to_matter { "yes".into() } else { "not shown to matter".into() },
            ])
        })
        .collect();
    Importance { summary, rows }
}
