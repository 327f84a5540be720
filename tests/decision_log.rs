//! The decision log `predict --log` keeps (the automatic record of each use a regulated team
//! keeps, as EU AI Act Article 12 asks of high-risk systems): its hash chain recomputes with
//! Python's `hashlib` (the standard library's SHA-256, FIPS 180-4), and `log-check` names an
//! edited line, a removed last line and a chain rewritten from an edited line on.

mod common;

use common::*;
use std::path::Path;
use std::process::Command;

/// Recomputes the chain with Python's hashlib alone: each line's `previous` is the SHA-256 of the
/// line before it (64 zeros for the first), and `chain` is the first 16 hex digits of the first
/// line's SHA-256 with its chain field empty. Prints the number of lines checked.
const PYTHON_CHECK: &str = r#"
import hashlib, json, sys
lines = open(sys.argv[1], "rb").read().split(b"\n")
assert lines[-1] == b"", "the log ends with a newline"
lines = lines[:-1]
previous = "0" * 64
chain = None
for n, raw in enumerate(lines, 1):
    line = json.loads(raw)
    assert line["seq"] == n, (n, line["seq"])
    assert line["previous"] == previous, (n, line["previous"], previous)
    if chain is None:
        unnamed = raw.replace(('"chain":"%s"' % line["chain"]).encode(), b'"chain":""', 1)
        chain = hashlib.sha256(unnamed).hexdigest()[:16]
    assert line["chain"] == chain, (n, line["chain"], chain)
    previous = hashlib.sha256(raw).hexdigest()
print(len(lines), previous)
"#;

/// Rewrites the chain from line `from` on, recomputing every `previous` with hashlib, as someone
/// with write access who edits a line and covers their tracks would.
const PYTHON_REWRITE: &str = r#"
import hashlib, sys
raw = open(sys.argv[1], "rb").read().split(b"\n")[:-1]
out = []
previous = None
for n, line in enumerate(raw, 1):
    if previous is not None and n >= int(sys.argv[2]):
        start = line.index(b'"previous":"') + len(b'"previous":"')
        line = line[:start] + previous.encode() + line[start + 64:]
    out.append(line)
    previous = hashlib.sha256(line).hexdigest()
open(sys.argv[1], "wb").write(b"\n".join(out) + b"\n")
"#;

fn python(script: &str, args: &[&str]) -> std::process::Output {
    Command::new("python3").arg("-c").arg(script).args(args).output().expect("python3")
}

fn log_check(dir: &Path, log: &str) -> (Option<i32>, String) {
    let out = run_in(dir, &["log-check", log, "--results", "results"]);
    (out.status.code(), stdout(&out) + &stderr(&out))
}

#[test]
fn the_decision_log_chain_recomputes_with_hashlib_and_every_break_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 1500, "");
    let folder = trained(d, &manifest);
    let folder = folder.to_str().unwrap();
    let log = "decisions.jsonl";
    for i in 0..3 {
        let out = run_in(d, &["predict", folder, "leases.parquet", "--out", &format!("scores-{i}.csv"), "--log", log]);
        assert!(out.status.success(), "{}", stderr(&out));
        assert!(stdout(&out).contains(&format!("logged    line {} of decisions.jsonl", i + 1)), "{}", stdout(&out));
    }
    // The log cannot be written inside a results store.
    let out = run_in(d, &["predict", folder, "leases.parquet", "--out", "s.csv", "--log", "results/log.jsonl"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("--log results/log.jsonl is inside the results store"), "{}", stderr(&out));

    let text = std::fs::read_to_string(d.join(log)).unwrap();
    let first: serde_json::Value = serde_json::from_str(text.lines().next().unwrap()).unwrap();
    assert_eq!(first["rows"], 1500);
    let counted: u64 = first["decisions"].as_object().unwrap().values().map(|v| v.as_u64().unwrap()).sum();
    assert_eq!(counted, 1500, "every scored row has one decision");
    assert_eq!(first["input_sha256"].as_str().unwrap().len(), 64);
    let checked = python(PYTHON_CHECK, &[d.join(log).to_str().unwrap()]);
    assert!(checked.status.success(), "hashlib: {}", String::from_utf8_lossy(&checked.stderr));
    assert!(String::from_utf8_lossy(&checked.stdout).starts_with("3 "));
    let (code, out) = log_check(d, log);
    assert_eq!(code, Some(0), "{out}");
    assert!(out.contains("3 lines, each linked to the one before") && out.contains("the log holds"), "{out}");
    // The results folder still verifies its evidence; the heads are attached records.
    assert!(Path::new(folder).join("decisions").is_dir() || d.join(folder).join("decisions").is_dir());

    // An edited line: the break is named at the next line, which names the edited one.
    let edited = d.join("edited.jsonl");
    std::fs::write(&edited, text.replacen("\"rows\":1500", "\"rows\":1400", 2).replacen("\"rows\":1400", "\"rows\":1500", 1)).unwrap();
    let (code, out) = log_check(d, "edited.jsonl");
    assert_eq!(code, Some(6), "{out}");
    assert!(out.contains("BROKEN at line 3") && out.contains("line 2 was changed"), "{out}");
    assert!(!python(PYTHON_CHECK, &[edited.to_str().unwrap()]).status.success(), "hashlib finds it too");

    // The last line removed: the chain is whole, but the results folder recorded line 3.
    let truncated = d.join("truncated.jsonl");
    let two: String = text.lines().take(2).map(|l| format!("{l}\n")).collect();
    std::fs::write(&truncated, &two).unwrap();
    assert!(python(PYTHON_CHECK, &[truncated.to_str().unwrap()]).status.success());
    let (code, out) = log_check(d, "truncated.jsonl");
    assert_eq!(code, Some(6), "{out}");
    assert!(out.contains("recorded line 3") && out.contains("its tail was removed"), "{out}");

    // A chain rewritten from an edited line 2 on: whole again, but not what was recorded.
    let rewritten = d.join("rewritten.jsonl");
    std::fs::write(&rewritten, text.replacen("\"rows\":1500", "\"rows\":1400", 2).replacen("\"rows\":1400", "\"rows\":1500", 1)).unwrap();
    let ok = python(PYTHON_REWRITE, &[rewritten.to_str().unwrap(), "3"]);
    assert!(ok.status.success(), "{}", String::from_utf8_lossy(&ok.stderr));
    assert!(python(PYTHON_CHECK, &[rewritten.to_str().unwrap()]).status.success(), "the rewritten chain is whole");
    let (code, out) = log_check(d, "rewritten.jsonl");
    assert_eq!(code, Some(6), "{out}");
    assert!(out.contains("line 2 hashes to") && out.contains("the chain was rewritten"), "{out}");

    // A broken log is never extended.
    let out = run_in(d, &["predict", folder, "leases.parquet", "--out", "s.csv", "--log", "edited.jsonl"]);
    assert_eq!(out.status.code(), Some(3), "{}", stderr(&out));
    assert!(stderr(&out).contains("a broken chain is not extended"), "{}", stderr(&out));
    // And verify still passes on the folder the heads were attached to.
    let out = run_in(d, &["verify", folder]);
    assert_eq!(out.status.code(), Some(0), "{}{}", stdout(&out), stderr(&out));
}
