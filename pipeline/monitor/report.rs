//! The monitoring report of one batch (`report.json` of its record): every population check (the
//! score, each feature) with its counts, stability index, chi-square test, missing, out-of-range
//! and unseen shares, the outcomes when the batch has them, and the overall status. It is a pure
//! function of the results folder's evidence and the batch's bytes, so monitoring the same batch
//! again must give it byte for byte; when and by which build it was recorded is kept apart
//! (`recorded.json`).

use serde::{Deserialize, Serialize};

use super::batch::Tally;
use super::outcomes::Outcomes;
use super::stability::{compare, Stability, SMOOTHING_RULE};
use super::status::{Status, Thresholds, Verdict};
use crate::analysis::profile::{BinnedColumn, Bins, ReferenceProfile};

/// The report's own format version.
pub(crate) const REPORT_VERSION: u32 = 1;

/// One column's batch population against its reference.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct PopulationCheck {
    pub column: String,
    pub bins: Vec<String>,
    pub reference: Vec<u64>,
    pub batch: Vec<u64>,
    pub stability: Stability,
    /// Whether the chi-square test rejects the reference population at alpha, whatever the size.
    pub detected: bool,
    /// Missing share in the reference and in the batch.
    pub missing_share: [f64; 2],
    /// Numbers: the batch's share outside the reference's [min, max].
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub out_of_range_share: Option<f64>,
    /// Categories: the batch's share of levels the reference never held.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub unseen_share: Option<f64>,
    pub verdict: Verdict,
}

/// `report.json`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct MonitorReport {
    pub report_version: u32,
    pub experiment: String,
    pub fingerprint: String,
    pub results_digest: String,
    pub batch_sha256: String,
    pub rows: usize,
    pub thresholds: Thresholds,
    pub smoothing: String,
    pub bins: String,
    /// What the score is (`probability of <label>`, `prediction`, `decided class`).
    pub score_means: String,
    pub score: PopulationCheck,
    pub features: Vec<PopulationCheck>,
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub outcomes: Option<Outcomes>,
    /// The worst check's status, and which checks set it.
    pub overall: Verdict,
}

impl MonitorReport {
    /// Every check's verdict, with what it checks.
    pub(crate) fn verdicts(&self) -> Vec<&Verdict> {
        let mut all: Vec<&Verdict> = vec![&self.score.verdict];
        all.extend(self.features.iter().map(|f| &f.verdict));
        if let Some(o) = &self.outcomes {
            all.extend(o.metrics.iter().map(|m| &m.verdict));
            all.extend(o.calibration.iter().map(|c| &c.verdict));
        }
        all
    }

    /// The largest stability index among the features.
    pub(crate) fn worst_feature_psi(&self) -> Option<(&str, f64)> {
        self.features.iter().map(|f| (f.column.as_str(), f.stability.psi)).max_by(|a, b| a.1.total_cmp(&b.1))
    }
}

fn share(part: u64, whole: u64) -> f64 {
    if whole == 0 {
        0.0
    } else {
        part as f64 / whole as f64
    }
}

fn population(
    name: &str,
    reference: &BinnedColumn,
    batch: Vec<u64>,
    out_of_range: Option<u64>,
    thresholds: &Thresholds,
) -> PopulationCheck {
    let stability = compare(&reference.counts, &batch);
    let (ref_total, batch_total) = (reference.counts.iter().sum::<u64>(), batch.iter().sum::<u64>());
    let missing = reference.bins.missing_bin();
    let unseen_share = reference.bins.unseen_bin().map(|u| share(batch[u], batch_total));
    PopulationCheck {
        column: name.to_string(),
        bins: reference.bins.labels(),
        reference: reference.counts.clone(),
        detected: stability.p_value < thresholds.alpha,
        missing_share: [share(reference.counts[missing], ref_total), share(batch[missing], batch_total)],
        out_of_range_share: match reference.bins {
            Bins::Numeric { .. } => out_of_range.map(|n| share(n, batch_total)),
            Bins::Levels { .. } => None,
        },
        unseen_share,
        verdict: thresholds.population(name, &stability),
        batch,
        stability,
    }
}

/// The overall verdict: the worst status, naming every check that has it.
fn overall(verdicts: &[&Verdict]) -> Verdict {
    let worst = verdicts.iter().map(|v| v.status).max().unwrap_or(Status::Stable);
    let setting: Vec<&str> = verdicts.iter().filter(|v| v.status == worst).map(|v| v.reason.as_str()).collect();
    let reason = match worst {
        Status::Stable => format!("all {} checks read stable", verdicts.len()),
        _ => {
            let shown = setting.iter().take(3).copied().collect::<Vec<_>>().join("; ");
            let more = if setting.len() > 3 { format!("; and {} more (see the report)", setting.len() - 3) } else { String::new() };
            format!("{} of {} checks read {}: {shown}{more}", setting.len(), verdicts.len(), worst.as_str())
        }
    };
    Verdict { status: worst, reason }
}

pub(crate) struct Identity<'a> {
    pub experiment: &'a str,
    pub fingerprint: &'a str,
    pub results_digest: &'a str,
    pub batch_sha256: &'a str,
}

/// The report of a batch's tally (and outcomes) against the profile.
pub(crate) fn assemble(
    id: Identity,
    profile: &ReferenceProfile,
    tally: Tally,
    outcomes: Option<Outcomes>,
    thresholds: Thresholds,
) -> MonitorReport {
    let score = population(&format!("score ({})", profile.score_means), &profile.score, tally.score, None, &thresholds);
    let features: Vec<PopulationCheck> = profile
        .features
        .iter()
        .zip(tally.features)
        .zip(tally.out_of_range)
        .map(|((reference, batch), out)| population(&reference.name, reference, batch, Some(out), &thresholds))
        .collect();
    let mut report = MonitorReport {
        report_version: REPORT_VERSION,
        experiment: id.experiment.to_string(),
        fingerprint: id.fingerprint.to_string(),
        results_digest: id.results_digest.to_string(),
        batch_sha256: id.batch_sha256.to_string(),
        rows: tally.rows,
        thresholds,
        smoothing: SMOOTHING_RULE.into(),
        bins: profile.method.clone(),
        score_means: profile.score_means.clone(),
        score,
        features,
        outcomes,
        overall: Verdict::stable(String::new()),
    };
    report.overall = overall(&report.verdicts());
    report
}
