//! The card's section on groups at the deployed decision: who receives the favourable outcome,
//! the adverse impact ratio, error-rate gaps and calibration per group, with intervals, from
//! `fairness.json`; and what these criteria can and cannot say.

use serde::Serialize;

use crate::analysis::fairness::{
    Estimate, FairnessReport, ADVERSE_IMPACT_RATIO, ECE, FALSE_POSITIVE_RATE, FPR_GAP, MEAN_RESIDUAL, RMSE, SELECTION_RATE, TPR_GAP,
    TRUE_POSITIVE_RATE,
};
use crate::card::cells::Row;
use crate::format::sig;
use crate::results::StoredResults;
use crate::text::{code_span, markdown_safe as md};

#[derive(Serialize)]
pub(crate) struct GroupTable {
    pub(crate) title: String,
    pub(crate) header: Vec<String>,
    pub(crate) rows: Vec<Row>,
}

#[derive(Serialize)]
pub(crate) struct Groups {
    /// Empty: no section (no group columns, or a folder before layout 5).
    pub(crate) summary: String,
    pub(crate) tables: Vec<GroupTable>,
    /// One sentence per group column probed (`[fairness] proxy_check`).
    pub(crate) proxies: Vec<String>,
    pub(crate) caveat: String,
}

fn cell(e: Option<&Estimate>) -> String {
    e.map(|e| format!("{} [{}, {}]", sig(e.value, 3), sig(e.lower, 3), sig(e.upper, 3))).unwrap_or_else(|| "–".into())
}

fn summary(f: &FairnessReport, positive: &str) -> String {
    let outcome = match &f.favourable {
        Some(label) => format!(
            "the favourable outcome is {}, so a group's selection rate is the share of its rows decided {}",
            code_span(label),
            code_span(label)
        ),
        None => format!(
            "no favourable outcome is declared (`[decision] favourable`), so the selection rate is the share decided {positive} and the four-fifths rule is not judged"
        ),
    };
    let at = f.threshold.map(|t| format!("At the deployed threshold {}, ", sig(t, 4))).unwrap_or_default();
    format!(
        "{at}{outcome}. Each group's figures come from its test rows; intervals are 95% percentile intervals of {} resamples drawn within each group. Ratios and gaps compare a group with the most favoured judged group (the highest selection rate). Groups with fewer than {} test rows are shown but not judged (common practice).",
        f.resamples, f.minimum_group_rows
    )
}

pub(crate) fn groups(st: &StoredResults) -> Groups {
    let Some(f) = &st.fairness else {
        return Groups { summary: String::new(), tables: Vec::new(), proxies: Vec::new(), caveat: String::new() };
    };
    let positive = st.record.class_labels.get(1).map(|l| code_span(l)).unwrap_or_default();
    let regression = st.manifest.data.task == crate::manifest::Task::Regression;
    let tables = f
        .columns
        .iter()
        .map(|c| {
            let reference = c.reference.as_deref();
            let header: Vec<String> = if regression {
                ["group", "rows", "mean target", "mean residual (target - prediction)", "RMSE"].map(String::from).to_vec()
            } else {
                [
                    "group",
                    "rows",
                    "base rate",
                    "selection rate",
                    "adverse impact ratio",
                    "true-positive rate",
                    "gap",
                    "false-positive rate",
                    "gap",
                    "ECE",
                ]
                .map(String::from)
                .to_vec()
            };
            let rows = c
                .groups
                .iter()
                .map(|g| {
                    let mut name = md(&g.level);
                    if Some(g.level.as_str()) == reference {
                        name.push_str(" (reference)");
                    }
                    if !g.judged {
                        name.push_str(" (not judged: few rows)");
                    }
                    let get = |k: &str| g.figures.get(k);
                    let cells: Vec<String> = if regression {
                        vec![name, g.rows.to_string(), sig(g.base_rate, 4), cell(get(MEAN_RESIDUAL)), cell(get(RMSE))]
                    } else {
                        vec![
                            name,
                            g.rows.to_string(),
                            sig(g.base_rate, 3),
                            cell(get(SELECTION_RATE)),
                            cell(get(ADVERSE_IMPACT_RATIO)),
                            cell(get(TRUE_POSITIVE_RATE)),
                            cell(get(TPR_GAP)),
                            cell(get(FALSE_POSITIVE_RATE)),
                            cell(get(FPR_GAP)),
                            cell(get(ECE)),
                        ]
                    };
                    Row::of(cells)
                })
                .collect();
            GroupTable { title: md(&c.column), header, rows }
        })
        .collect();
    let caveat = "These criteria can conflict: when base rates differ between groups, no imperfect model can equalise calibration within groups and both error rates at once (Kleinberg, Mullainathan & Raghavan 2017; Chouldechova 2017), so a reviewer weighs which matters for this decision. The analysis informs that review; it is not a legal finding, and the standard that applies is set by local law and licensed practice.".to_string();
    let proxies = f
        .proxies
        .iter()
        .map(|p| match &p.roc_auc {
            Some(auc) => format!(
                "A linear probe on the network's {} inputs, fitted on the {} training rows, tells the {} groups of {} apart on the {} test rows with ROC AUC {}{} (0.5: the inputs say nothing about the group; 1: they reveal it{}).",
                p.inputs,
                p.train_rows,
                p.groups,
                md(&p.column),
                p.test_rows,
                cell(Some(auc)),
                if p.groups > 2 { ", macro one-against-the-rest" } else { "" },
                if auc.lower > 0.6 { "; here a network can treat the groups differently without being given the column" } else { "" }
            ),
            None => format!(
                "{} was not probed: it has fewer than two groups, a group missing from the test rows, or more than {} inputs.",
                md(&p.column),
                crate::analysis::proxy::MAX_PROBE_INPUTS
            ),
        })
        .collect();
    Groups {
        proxies,
        summary: if regression {
            format!("Each group's figures come from its test rows; intervals are 95% percentile intervals of {} resamples drawn within each group. Groups with fewer than {} test rows are shown but not judged (common practice).", f.resamples, f.minimum_group_rows)
        } else {
            summary(f, &positive)
        },
        tables,
        caveat,
    }
}
