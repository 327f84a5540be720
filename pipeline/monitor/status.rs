//! The three monitoring statuses and the verdict of one check: a status and the figure that set
//! it. The overall status of a batch is its worst check's.

use serde::{Deserialize, Serialize};

#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub(crate) enum Status {
    /// Nothing the checks can tell apart from the reference.
    Stable,
    /// A change worth a look at the next review.
    Watch,
    /// A change large enough to stop and review the model before it scores more.
    Act,
}

impl Status {
    pub(crate) fn as_str(self) -> &'static str {
        match self {
            Status::Stable => "stable",
            Status::Watch => "watch",
            Status::Act => "act",
        }
    }
}

/// A check's status and, in words, the figure that set it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Verdict {
    pub status: Status,
    pub reason: String,
}

impl Verdict {
    pub(crate) fn stable(reason: String) -> Self {
        Verdict { status: Status::Stable, reason }
    }
}

/// The thresholds populations are judged by (`[monitoring]` in the manifest).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub(crate) struct Thresholds {
    pub psi_watch: f64,
    pub psi_act: f64,
    pub alpha: f64,
}

impl Thresholds {
    pub(crate) fn of(manifest: &crate::manifest::Manifest) -> Self {
        let spec = manifest.monitoring.clone().unwrap_or_default();
        Thresholds { psi_watch: spec.psi_watch(), psi_act: spec.psi_act(), alpha: spec.alpha() }
    }

    /// A population's verdict: "act" at `psi_act`, "watch" at `psi_watch`, each only when the
    /// chi-square test rejects the reference population at `alpha`.
    pub(crate) fn population(&self, name: &str, s: &super::stability::Stability) -> Verdict {
        let figures = format!("{name}: PSI {} (p = {})", crate::format::sig(s.psi, 3), crate::format::sig(s.p_value, 3));
        let rejected = s.p_value < self.alpha;
        if rejected && s.psi >= self.psi_act {
            Verdict { status: Status::Act, reason: format!("{figures}: PSI at least {} and p below {}", self.psi_act, self.alpha) }
        } else if rejected && s.psi >= self.psi_watch {
            Verdict { status: Status::Watch, reason: format!("{figures}: PSI at least {} and p below {}", self.psi_watch, self.alpha) }
        } else {
            Verdict::stable(figures)
        }
    }
}
