//! The decision log `predict --log FILE` keeps: one JSON line per scoring (time, model, results
//! digest, the input table's content hash, rows scored, threshold, counts of decisions), each
//! line carrying the SHA-256 of the line before it (the first, of nothing: 64 zeros), so an edited
//! or removed line breaks the chain from that line on. The chain's latest line is also recorded
//! in a second place, a `decisions/<chain>-<seq>/` attached record of the results folder that
//! scored it, so a removed tail or a wholesale rewrite (a new chain recomputed from an edited
//! line) is found by [`check`] even though the chain itself would be whole.
//!
//! Appends take an exclusive lock on the log file, read and check the chain, then write one line
//! with a single write and sync it: two scorings never fork the chain, and a broken chain is
//! never extended.

use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::io::{Read, Seek, Write};
use std::path::Path;

use crate::error::{Error, Result};
use crate::fingerprint::sha256_hex;

/// The `previous` of a chain's first line.
pub const GENESIS: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// The attached-record kind the chain heads are kept under in a results folder.
pub const KIND: &str = "decisions";
pub const HEAD: &str = "head.json";

/// One scoring, as the log records it (fields in this order, compact JSON, one line).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LogLine {
    /// 1 for the first line, then one more per line.
    pub seq: u64,
    /// The chain's name: the first 16 hex digits of its first line's SHA-256 computed with this
    /// field empty; every line repeats it.
    pub chain: String,
    pub time: String,
    /// The experiment fingerprint and the model (run id, or `ensemble:...`) that scored.
    pub fingerprint: String,
    pub model_id: String,
    /// The results folder's name, beside the others at its results root.
    pub results: String,
    pub results_digest: String,
    /// The content SHA-256 of the scored table (as the data fingerprint computes it).
    pub input_sha256: String,
    pub rows: usize,
    /// Binary models: the threshold decided at.
    pub threshold: Option<f64>,
    /// Classifiers: how many rows got each decision.
    pub decisions: Option<BTreeMap<String, usize>>,
    /// SHA-256 of the previous line's text (without its newline); [`GENESIS`] for the first.
    pub previous: String,
}

/// What one scoring contributes; [`append`] adds the sequence, chain and previous hash.
pub struct Scoring {
    pub fingerprint: String,
    pub model_id: String,
    pub results: String,
    pub results_digest: String,
    pub input_sha256: String,
    pub rows: usize,
    pub threshold: Option<f64>,
    pub decisions: Option<BTreeMap<String, usize>>,
}

/// The head a results folder records: the chain's latest line when this folder scored.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChainHead {
    pub chain: String,
    pub seq: u64,
    pub line_sha256: String,
    pub time: String,
}

/// Where a chain first breaks.
#[derive(Debug, Clone, PartialEq)]
pub struct Break {
    /// 1-based line number.
    pub line: usize,
    pub reason: String,
}

fn line_text(line: &LogLine) -> Result<String> {
    serde_json::to_string(line).map_err(|e| Error::Internal(format!("decision log line: {e}")))
}

/// Checks the chain of `text` line by line; returns its lines, or where it first breaks.
pub fn check_chain(text: &str) -> std::result::Result<Vec<LogLine>, Break> {
    let mut lines = Vec::new();
    let mut previous = GENESIS.to_string();
    let mut chain = String::new();
    if !text.is_empty() && !text.ends_with('\n') {
        let n = text.lines().count();
        return Err(Break { line: n, reason: "is cut short (no final newline): a write was interrupted or the file was edited".into() });
    }
    for (i, raw) in text.lines().enumerate() {
        let n = i + 1;
        let broken = |reason: String| Break { line: n, reason };
        let line: LogLine = serde_json::from_str(raw).map_err(|e| broken(format!("is not a decision log line ({e})")))?;
        if line_text(&line).ok().as_deref() != Some(raw) {
            return Err(broken("is not in the form tabcard writes (compact JSON, fields in order)".into()));
        }
        if line.seq != n as u64 {
            return Err(broken(format!("says it is line {}: a line before it was removed or inserted", line.seq)));
        }
        if line.previous != previous {
            return Err(broken(format!(
                "names {} as the previous line's SHA-256, but line {} hashes to {previous}: line {} was changed",
                line.previous,
                n - 1,
                n - 1
            )));
        }
        if n == 1 {
            let mut unnamed = line.clone();
            unnamed.chain = String::new();
            chain = sha256_hex(line_text(&unnamed).map_err(|e| broken(e.to_string()))?.as_bytes())[..16].to_string();
        }
        if line.chain != chain {
            return Err(broken(format!("names chain {}, but the log's first line makes it {chain}", line.chain)));
        }
        previous = sha256_hex(raw.as_bytes());
        lines.push(line);
    }
    Ok(lines)
}

/// Appends one scoring to the log at `path` (created if absent) and returns the new head.
pub fn append(path: &Path, scoring: Scoring) -> Result<ChainHead> {
    let mut file = std::fs::OpenOptions::new()
        .read(true)
        .append(true)
        .create(true)
        .open(path)
        .map_err(|e| Error::io(path, "open the decision log", e))?;
    file.lock().map_err(|e| Error::io(path, "lock the decision log", e))?;
    let mut text = String::new();
    file.seek(std::io::SeekFrom::Start(0)).map_err(|e| Error::io(path, "read the decision log", e))?;
    file.read_to_string(&mut text).map_err(|e| Error::io(path, "read the decision log", e))?;
    let lines = check_chain(&text).map_err(|b| {
        Error::store(path, format!("line {} {}: a broken chain is not extended (`tabcard log-check` names what broke)", b.line, b.reason))
    })?;
    let previous = text.lines().last().map(|l| sha256_hex(l.as_bytes())).unwrap_or_else(|| GENESIS.to_string());
    let Scoring { fingerprint, model_id, results, results_digest, input_sha256, rows, threshold, decisions } = scoring;
    let mut line = LogLine {
        seq: lines.len() as u64 + 1,
        chain: String::new(),
        time: crate::provenance::now_rfc3339(),
        fingerprint,
        model_id,
        results,
        results_digest,
        input_sha256,
        rows,
        threshold,
        decisions,
        previous,
    };
    line.chain = match lines.first() {
        Some(first) => first.chain.clone(),
        None => sha256_hex(line_text(&line)?.as_bytes())[..16].to_string(),
    };
    let text = line_text(&line)?;
    file.write_all(format!("{text}\n").as_bytes()).map_err(|e| Error::io(path, "append to the decision log", e))?;
    file.sync_all().map_err(|e| Error::io(path, "sync the decision log", e))?;
    Ok(ChainHead { chain: line.chain, seq: line.seq, line_sha256: sha256_hex(text.as_bytes()), time: line.time })
}

/// Records `head` in the results folder at `root` (`decisions/<chain>-<seq>/head.json`).
pub fn record_head(root: &Path, head: &ChainHead) -> Result<()> {
    let bytes = serde_json::to_vec_pretty(head).map_err(|e| Error::Internal(format!("chain head: {e}")))?;
    super::attached::attach(root, KIND, &format!("{}-{:08}", head.chain, head.seq), &[(HEAD, &bytes)]).map(|_| ())
}

/// The heads of `chain` recorded in the results folder at `root`, in sequence order; a record
/// that does not match its own list is an error naming it.
pub fn recorded_heads(root: &Path, chain: &str) -> Result<Vec<ChainHead>> {
    let mut heads = Vec::new();
    for (name, record) in super::attached::check_each(root, KIND)? {
        if !name.starts_with(&format!("{chain}-")) {
            continue;
        }
        let record = record?;
        let path = root.join(KIND).join(&record.name).join(HEAD);
        heads.push(super::read_json::<ChainHead>(&path)?);
    }
    heads.sort_by_key(|h| h.seq);
    Ok(heads)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scoring(rows: usize) -> Scoring {
        Scoring {
            fingerprint: "f".repeat(64),
            model_id: "c01-s1".into(),
            results: "ffffffffffffffff".into(),
            results_digest: "d".repeat(64),
            input_sha256: "a".repeat(64),
            rows,
            threshold: Some(0.25),
            decisions: Some(BTreeMap::from([("no".to_string(), rows - 1), ("yes".to_string(), 1)])),
        }
    }

    #[test]
    fn the_chain_links_every_line_to_the_one_before_and_names_the_first_break() {
        let dir = tempfile::tempdir().unwrap();
        let log = dir.path().join("decisions.jsonl");
        let heads: Vec<ChainHead> = (0..4).map(|i| append(&log, scoring(10 + i)).unwrap()).collect();
        assert_eq!(heads.iter().map(|h| h.seq).collect::<Vec<_>>(), vec![1, 2, 3, 4]);
        assert!(heads.iter().all(|h| h.chain == heads[0].chain));
        let text = std::fs::read_to_string(&log).unwrap();
        let lines = check_chain(&text).unwrap();
        assert_eq!(lines[2].rows, 12);
        assert_eq!(heads[3].line_sha256, sha256_hex(text.lines().last().unwrap().as_bytes()));
        // An edited second line: the break is found at the third, which names the second.
        let edited = text.replacen("\"rows\":11", "\"rows\":99", 1);
        let b = check_chain(&edited).unwrap_err();
        assert_eq!(b.line, 3, "{b:?}");
        assert!(b.reason.contains("line 2 was changed"), "{}", b.reason);
        // A removed middle line.
        let removed: String = text.lines().enumerate().filter(|(i, _)| *i != 1).map(|(_, l)| format!("{l}\n")).collect();
        assert_eq!(check_chain(&removed).unwrap_err().line, 2);
        // A cut last line, and a broken chain is not extended.
        std::fs::write(&log, &text[..text.len() - 5]).unwrap();
        assert!(check_chain(&std::fs::read_to_string(&log).unwrap()).unwrap_err().reason.contains("cut short"));
        assert!(append(&log, scoring(5)).unwrap_err().to_string().contains("a broken chain is not extended"));
    }
}
