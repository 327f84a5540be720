//! The experiment's timing record (`timing.json`): when it was trained, from which commit of the
//! manifest's repository, with how many workers and how long each run took. It is the one
//! experiment file outside the integrity list: it may differ between two identical sweeps.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::path::Path;

use crate::error::{Error, Result};

#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct TimingRecord {
    /// RFC 3339 UTC time the selection was made.
    pub trained_at: String,
    /// The manifest repository's commit, when the manifest is in git.
    pub git_commit: Option<String>,
    /// Whether that repository had uncommitted changes to tracked files.
    pub git_dirty: Option<bool>,
    /// Runs trained at once.
    pub jobs: usize,
    /// Threads the runs shared (absent before tabcard 0.11, when each run computed on one).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub threads: Option<usize>,
    /// Wall time of the whole `train` invocation.
    pub wall_seconds: f64,
    /// Training time of every stored run, by run id.
    pub run_seconds: BTreeMap<String, f64>,
    /// Wall time of each phase of the invocation, in order (absent before tabcard 0.5).
    #[serde(default)]
    pub phases: Vec<Phase>,
    /// Who trained: git's `user.email` in the manifest's repository, else the login name
    /// (absent before tabcard 0.10); review checks name a validator or approver who is this person.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub trained_by: Option<String>,
}

/// One phase of a `train` invocation and its wall time.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub(crate) struct Phase {
    pub name: String,
    pub seconds: f64,
    /// The phase this one is a part of (absent for the top-level phases, and before tabcard 0.12).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub within: Option<String>,
}

impl Phase {
    /// A top-level phase.
    pub(crate) fn top(name: &str, seconds: f64) -> Self {
        Phase { name: name.into(), seconds, within: None }
    }

    /// A part of the phase `within`.
    pub(crate) fn part(name: &str, within: &str, seconds: f64) -> Self {
        Phase { name: name.into(), seconds, within: Some(within.into()) }
    }
}

/// Names of the phases `train` times.
pub(crate) mod phase {
    /// File hash and the first pass over the data (content hash, checks, summary, split, fit).
    pub(crate) const SCAN: &str = "read, hash and check the data";
    /// The second pass: the training and validation matrices.
    pub(crate) const MATRICES: &str = "build the training and validation matrices";
    pub(crate) const SWEEP: &str = "train the runs";
    /// Test matrix, selection and the test evaluation, then the analyses of the selected model
    /// (each timed as a part of this phase).
    pub(crate) const SELECT: &str = "select and test";
    /// Parts of `SELECT`.
    pub(crate) const EVALUATE: &str = "selection and the test evaluation with its bootstrap";
    pub(crate) const FAIRNESS: &str = "fairness";
    pub(crate) const IMPORTANCE: &str = "permutation importance";
    pub(crate) const SENSITIVITY: &str = "sensitivity, attributions and curves";
    pub(crate) const PROFILE: &str = "monitoring profile";
}

impl TimingRecord {
    /// Checks the fields that reach the card. The timing record is outside the integrity list,
    /// so nothing in it is trusted: the time must be an RFC 3339 UTC time as tabcard writes it
    /// (`YYYY-MM-DDTHH:MM:SSZ`), the commit a git object name (40 or 64 hexadecimal digits).
    pub(crate) fn check(&self, path: &Path) -> Result<()> {
        let invalid = |what: String| {
            Error::integrity(
                path,
                format!(
                    "is not a timing record tabcard wrote: {what}. It is outside the integrity list, so the card cannot vouch for it: \
                     restore it (e.g. from git) or delete it (the card then says \"unknown\")"
                ),
            )
        };
        if !is_utc_timestamp(&self.trained_at) {
            return Err(invalid(format!("`trained_at` {:?} is not an RFC 3339 UTC time (YYYY-MM-DDTHH:MM:SSZ)", self.trained_at)));
        }
        if let Some(commit) = &self.git_commit {
            if !is_git_object_name(commit) {
                return Err(invalid(format!("`git_commit` {commit:?} is not a git commit (40 or 64 hexadecimal digits)")));
            }
        }
        if self.jobs == 0 {
            return Err(invalid("`jobs` is 0".into()));
        }
        Ok(())
    }
}

/// Reads and checks a timing record; `None` when the file is absent.
pub(crate) fn read(path: &Path) -> Result<Option<TimingRecord>> {
    if !path.exists() {
        return Ok(None);
    }
    let bytes = std::fs::read(path).map_err(|e| Error::io(path, "read", e))?;
    let record: TimingRecord = serde_json::from_slice(&bytes).map_err(|e| {
        Error::integrity(path, format!("is not a timing record tabcard wrote ({e}); restore it (e.g. from git) or delete it"))
    })?;
    record.check(path)?;
    Ok(Some(record))
}

/// `YYYY-MM-DDTHH:MM:SSZ` with every field in its calendar range.
pub(crate) fn is_utc_timestamp(s: &str) -> bool {
    let b = s.as_bytes();
    let digits = |r: std::ops::Range<usize>| -> Option<u32> {
        let part = s.get(r)?;
        part.bytes().all(|c| c.is_ascii_digit()).then(|| part.parse().ok()).flatten()
    };
    if b.len() != 20 || b[4] != b'-' || b[7] != b'-' || b[10] != b'T' || b[13] != b':' || b[16] != b':' || b[19] != b'Z' {
        return false;
    }
    let (Some(_), Some(month), Some(day), Some(hour), Some(minute), Some(second)) =
        (digits(0..4), digits(5..7), digits(8..10), digits(11..13), digits(14..16), digits(17..19))
    else {
        return false;
    };
    (1..=12).contains(&month) && (1..=31).contains(&day) && hour < 24 && minute < 60 && second < 61
}

/// A git object name: 40 (SHA-1) or 64 (SHA-256) lowercase hexadecimal digits.
pub(crate) fn is_git_object_name(s: &str) -> bool {
    (s.len() == 40 || s.len() == 64) && s.bytes().all(|c| c.is_ascii_digit() || (b'a'..=b'f').contains(&c))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn only_tabcards_own_time_and_commit_forms_pass() {
        assert!(is_utc_timestamp("2026-12-03T08:22:26Z"));
        for bad in
            ["2026-12-03T08:22:26+01:00", "2026-13-03T08:22:26Z", "<img src=x onerror=alert(1)>", "2026-12-03T08:22:26Z\n# Approved", ""]
        {
            assert!(!is_utc_timestamp(bad), "{bad:?}");
        }
        assert!(is_git_object_name(&"a".repeat(40)) && is_git_object_name(&"0f".repeat(32)));
        for bad in ["abc", "[x](http://e.com)", &"g".repeat(40), &"A".repeat(40)] {
            assert!(!is_git_object_name(bad), "{bad:?}");
        }
    }
}
