//! Promises that hostile use must not break: a sealed folder's evidence is written once (a second
//! `train` of the same experiment writes nothing in it, whatever changed outside the fingerprint);
//! nothing outside the sealed evidence reaches the card unvalidated (the timing record is checked
//! and escaped); a writer lock whose holder is gone (pid reused, the own pid of a killed
//! predecessor) never makes `train` wait, and a live one says for whom and how to clear it.
//! Each case failed on tabcard 0.5.0.

mod common;

use common::*;
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

/// Every file under `root` (relative path -> bytes and modification time).
fn snapshot(root: &Path) -> BTreeMap<String, (Vec<u8>, std::time::SystemTime)> {
    fn walk(root: &Path, dir: &Path, out: &mut BTreeMap<String, (Vec<u8>, std::time::SystemTime)>) {
        for e in std::fs::read_dir(dir).unwrap() {
            let p = e.unwrap().path();
            if p.is_dir() {
                walk(root, &p, out);
            } else {
                let rel = p.strip_prefix(root).unwrap().to_string_lossy().into_owned();
                out.insert(rel, (std::fs::read(&p).unwrap(), std::fs::metadata(&p).unwrap().modified().unwrap()));
            }
        }
    }
    let mut out = BTreeMap::new();
    walk(root, root, &mut out);
    out
}

fn train(dir: &Path, manifest: &Path) -> std::process::Output {
    run_in(dir, &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2", "--quiet"])
}

#[test]
fn a_second_train_of_a_sealed_experiment_writes_nothing_in_its_folder() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let before = snapshot(&folder);
    let ledger_before = std::fs::read_to_string(d.join("results/ledger.jsonl")).unwrap();

    // Three changes that keep the fingerprint: a comment in the manifest, the same table
    // re-encoded (other row groups, no dictionary), and the project copied to another folder.
    let mut text = std::fs::read_to_string(&manifest).unwrap();
    text.insert_str(0, "# reviewed again on Monday\n");
    std::fs::write(&manifest, &text).unwrap();
    let out = train(d, &manifest);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).contains("nothing to train"), "{}", stdout(&out));

    let columns = tabcard::demo::lease_defaults(300, 7);
    let options = tabcard::data::parquet::WriteOptions { snappy: false, row_group_rows: 37 };
    let reencoded = tabcard::data::parquet::encode(columns, options).unwrap();
    let original_table = std::fs::read(d.join("leases.parquet")).unwrap();
    assert_ne!(reencoded, original_table, "the file's bytes change");
    std::fs::write(d.join("leases.parquet"), reencoded).unwrap();
    let out = train(d, &manifest);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).contains("nothing to train"), "{}", stdout(&out));

    let elsewhere = tempfile::tempdir().unwrap();
    copy_dir(d, elsewhere.path());
    let copied_folder = elsewhere.path().join("results").join(folder.file_name().unwrap());
    let copied_before = snapshot(&copied_folder);
    let out = train(elsewhere.path(), &elsewhere.path().join("small.toml"));
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).contains("nothing to train"), "{}", stdout(&out));
    assert_eq!(snapshot(&copied_folder), copied_before, "the copy's folder is untouched too");

    assert_eq!(snapshot(&folder), before, "no file of the sealed folder was rewritten (bytes and modification times)");
    // verify checks the recorded file itself (its SHA-256), so it gets the original bytes back.
    std::fs::write(d.join("leases.parquet"), original_table).unwrap();
    assert_eq!(std::fs::read_to_string(d.join("results/ledger.jsonl")).unwrap(), ledger_before, "no ledger line for nothing new");
    for args in [vec!["verify", folder.to_str().unwrap(), "--quiet"], vec!["card", folder.to_str().unwrap()]] {
        let out = run_in(d, &args);
        assert!(out.status.success(), "{args:?}: {}{}", stdout(&out), stderr(&out));
    }
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "scores.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
}

#[test]
fn a_tampered_sealed_folder_is_refused_by_train_before_anything_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let selection = folder.join("selection.json");
    let mut bytes = std::fs::read(&selection).unwrap();
    let last = bytes.len() - 2;
    bytes[last] ^= 0x01;
    std::fs::write(&selection, &bytes).unwrap();
    let before = snapshot(&folder);
    let out = train(d, &manifest);
    assert_eq!(out.status.code(), Some(6), "{}", stderr(&out));
    assert!(stderr(&out).contains("selection.json: was changed after it was recorded"), "{}", stderr(&out));
    assert_eq!(snapshot(&folder), before);
}

/// An edit of a timing record.
type Forgery = Box<dyn Fn(&mut serde_json::Value)>;

/// Replaces fields of the folder's timing record.
fn forge_timing(folder: &Path, edit: impl FnOnce(&mut serde_json::Value)) {
    let path = folder.join("timing.json");
    let mut value: serde_json::Value = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    edit(&mut value);
    std::fs::write(&path, serde_json::to_vec_pretty(&value).unwrap()).unwrap();
}

#[test]
fn a_forged_timing_record_never_reaches_the_card_and_card_and_verify_agree() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let card_before = std::fs::read(folder.join("card.md")).unwrap();
    let original = std::fs::read(folder.join("timing.json")).unwrap();
    let forgeries: Vec<(&str, Forgery)> = vec![
        ("trained_at", Box::new(|v| v["trained_at"] = "<img src=x onerror=alert(1)>".into())),
        ("trained_at", Box::new(|v| v["trained_at"] = "2026-12-01T10:00:00Z\n\n## Sign-off: approved".into())),
        ("git_commit", Box::new(|v| v["git_commit"] = "[approved](http://example.com/evil)".into())),
        ("git_commit", Box::new(|v| v["git_commit"] = format!("{}` <b>x</b>", "a".repeat(40)).into())),
    ];
    for (field, forge) in forgeries {
        std::fs::write(folder.join("timing.json"), &original).unwrap();
        forge_timing(&folder, forge);
        let card = run_in(d, &["card", folder.to_str().unwrap()]);
        assert_eq!(card.status.code(), Some(6), "card: {}", stderr(&card));
        assert!(
            stderr(&card).contains("timing.json: is not a timing record tabcard wrote") && stderr(&card).contains(field),
            "{}",
            stderr(&card)
        );
        let verify = run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]);
        assert_eq!(verify.status.code(), Some(6), "verify: {}", stdout(&verify));
        assert!(
            stdout(&verify).contains("card      CANNOT be re-rendered") && stdout(&verify).contains("NOT verified"),
            "{}",
            stdout(&verify)
        );
        assert_eq!(std::fs::read(folder.join("card.md")).unwrap(), card_before, "the card was not rewritten");
    }
    // Not JSON at all: the same verdict from both commands.
    std::fs::write(folder.join("timing.json"), b"{ not json").unwrap();
    assert_eq!(run_in(d, &["card", folder.to_str().unwrap()]).status.code(), Some(6));
    assert_eq!(run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]).status.code(), Some(6));
    // Restored, everything passes again and the card is the one it was.
    std::fs::write(folder.join("timing.json"), &original).unwrap();
    let card = run_in(d, &["card", folder.to_str().unwrap()]);
    assert!(card.status.success(), "{}", stderr(&card));
    assert_eq!(std::fs::read(folder.join("card.md")).unwrap(), card_before);
}

/// Runs `train` with a deadline: the lock tests must fail, not hang, when a stale lock is honoured.
fn train_with_deadline(dir: &Path, manifest: &Path, deadline: Duration) -> (Option<i32>, String) {
    run_within(dir, &["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "2", "--quiet"], deadline)
}

/// The folder `train` will write for `manifest` (its short fingerprint, from `check --json`).
fn folder_of(dir: &Path, manifest: &Path) -> PathBuf {
    let out = run_in(dir, &["check", manifest.to_str().unwrap(), "--json"]);
    let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let fingerprint = report["fingerprint"].as_str().unwrap().to_string();
    dir.join("results").join(&fingerprint[..16])
}

fn process_start_ticks(pid: u32) -> String {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).unwrap();
    stat[stat.rfind(')').unwrap() + 1..].split_whitespace().nth(19).unwrap().to_string()
}

#[test]
fn stale_locks_of_reused_pids_are_taken_over_and_a_live_one_says_how_to_clear_it() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 200, "");
    let folder = folder_of(d, &manifest);
    std::fs::create_dir_all(&folder).unwrap();
    let host = tabcard::provenance::host_name();
    let lock = folder.join(".writer.lock");

    // A process that lives: first as the holder itself (train must wait and say so, even under
    // --quiet), then as a process that took over a dead holder's pid (another start time).
    let mut other = Command::new("sleep").arg("60").spawn().unwrap();
    let now = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap().as_secs();
    std::fs::write(&lock, format!("{host} {} {now} {}\n", other.id(), process_start_ticks(other.id()))).unwrap();
    let (status, err) = train_with_deadline(d, &manifest, Duration::from_secs(3));
    assert_eq!(status, None, "a live holder is waited for");
    assert!(err.contains(&format!("(pid {}", other.id())) && err.contains("delete ") && err.contains(".writer.lock"), "{err}");

    let stale_locks = [
        // The pid is alive but started at another time than the holder did.
        format!("{host} {} {now} 1\n", other.id()),
        // A tabcard 0.5 lock (no start field) whose pid now belongs to a process started later.
        format!("{host} {} {}\n", other.id(), now - 3600),
    ];
    for text in stale_locks {
        let _ = std::fs::remove_dir_all(d.join("results"));
        std::fs::create_dir_all(&folder).unwrap();
        std::fs::write(&lock, &text).unwrap();
        let (status, err) = train_with_deadline(d, &manifest, Duration::from_secs(120));
        assert_eq!(status, Some(0), "{text:?} is stale: {err}");
    }
    other.kill().unwrap();
    let _ = other.wait();
}

/// Rewrites `integrity.sha256` over the files it names (a forger's reseal).
fn reseal(folder: &Path) {
    let list = folder.join("integrity.sha256");
    let text = std::fs::read_to_string(&list).unwrap();
    let lines: String = text
        .lines()
        .map(|l| {
            let path = l.split_once("  ").unwrap().1;
            format!("{}  {path}\n", tabcard::fingerprint::file_sha256(&folder.join(path)).unwrap())
        })
        .collect();
    std::fs::write(list, lines).unwrap();
}

#[test]
fn the_integrity_list_names_only_plain_files_of_the_folder() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let list = folder.join("integrity.sha256");
    let original = std::fs::read_to_string(&list).unwrap();
    let verify = |what: &str, expect: &str| {
        let out = run_in(d, &["card", folder.to_str().unwrap()]);
        assert_eq!(out.status.code(), Some(6), "{what}: {}", stderr(&out));
        assert!(stderr(&out).contains(expect), "{what}: {}", stderr(&out));
    };
    // An absolute path (verify would otherwise read any file of the machine) and a climb out.
    let outside = d.join("outside.txt");
    std::fs::write(&outside, "x").unwrap();
    for path in [outside.to_str().unwrap().to_string(), "../outside.txt".into(), "runs//x".into()] {
        let sha = tabcard::fingerprint::file_sha256(&outside).unwrap();
        std::fs::write(&list, format!("{original}{sha}  {path}\n")).unwrap();
        verify(&path, "is not `<SHA-256>  <path>` of a file this list may name");
    }
    std::fs::write(&list, &original).unwrap();
    // An added dot-entry, and a dot-folder.
    std::fs::write(folder.join(".hidden"), "x").unwrap();
    verify("dot file", ".hidden: is not listed");
    std::fs::remove_file(folder.join(".hidden")).unwrap();
    std::fs::create_dir(folder.join(".stash")).unwrap();
    verify("dot folder", ".stash: is a folder not listed");
    std::fs::remove_dir(folder.join(".stash")).unwrap();
    // A listed file replaced by a symbolic link to identical content.
    let plan = folder.join("plan.json");
    std::fs::copy(&plan, d.join("plan-copy.json")).unwrap();
    std::fs::remove_file(&plan).unwrap();
    std::os::unix::fs::symlink(d.join("plan-copy.json"), &plan).unwrap();
    verify("symlink", "plan.json: is a symbolic link");
    std::fs::remove_file(&plan).unwrap();
    std::fs::copy(d.join("plan-copy.json"), &plan).unwrap();
    let out = run_in(d, &["card", folder.to_str().unwrap()]);
    assert!(out.status.success(), "restored: {}", stderr(&out));
}

#[test]
fn predict_refuses_weights_that_disagree_with_their_run_record() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let selection: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("selection.json")).unwrap()).unwrap();
    let selected = selection["selected_run"].as_str().unwrap();
    let config = selection["selected_config"].as_str().unwrap();
    // The other seed's weights of the same configuration: same shapes, other values.
    let other = std::fs::read_dir(folder.join("runs"))
        .unwrap()
        .map(|e| e.unwrap().path())
        .find(|p| {
            let r: serde_json::Value = serde_json::from_slice(&std::fs::read(p.join("result.json")).unwrap()).unwrap();
            r["config_id"] == config && r["run_id"] != selected
        })
        .unwrap();
    let run = folder.join("runs").join(selected);
    std::fs::copy(other.join("weights.safetensors"), run.join("weights.safetensors")).unwrap();
    // The forger rewrites the run's checksums and the folder's list to match.
    let mut checksums: serde_json::Value = serde_json::from_slice(&std::fs::read(run.join("checksums.json")).unwrap()).unwrap();
    checksums["files"]["weights.safetensors"] = tabcard::fingerprint::file_sha256(&run.join("weights.safetensors")).unwrap().into();
    std::fs::write(run.join("checksums.json"), serde_json::to_vec_pretty(&checksums).unwrap()).unwrap();
    reseal(&folder);
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "scores.csv"]);
    assert_eq!(out.status.code(), Some(6), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("weights.safetensors: tensor `") && stderr(&out).contains("the weights were replaced"),
        "{}",
        stderr(&out)
    );
    assert!(!d.join("scores.csv").exists());
}

#[test]
fn list_never_shows_a_tampered_folder_as_verified() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]);
    assert!(out.status.success(), "{}", stdout(&out));
    let listed = stdout(&run_in(d, &["list"]));
    assert!(listed.lines().nth(1).unwrap().contains(" yes: 2 of 4 runs on "), "verified, not monitored yet: {listed}");
    assert!(listed.lines().nth(1).unwrap().trim_end().ends_with(" -"), "not monitored yet: {listed}");
    let selection = folder.join("selection.json");
    let text = std::fs::read_to_string(&selection).unwrap();
    let value: serde_json::Value = serde_json::from_str(&text).unwrap();
    let metric = value["metric"].as_str().unwrap().to_string();
    let mut edited = value.clone();
    edited["test"]["metrics"][&metric] = 0.97.into();
    std::fs::write(&selection, serde_json::to_vec_pretty(&edited).unwrap()).unwrap();
    let out = run_in(d, &["list"]);
    let listed = stdout(&out);
    assert!(listed.lines().nth(1).unwrap().contains(" TAMPERED ") && !listed.contains("yes: "), "{listed}");
    assert!(!listed.contains("0.9700"), "the forged figure is not shown: {listed}");
    assert!(listed.contains("selection.json: was changed after it was recorded"), "{listed}");
    let json: serde_json::Value = serde_json::from_slice(&run_in(d, &["list", "--json"]).stdout).unwrap();
    assert_eq!(json["experiments"][0]["verified"]["status"], "TAMPERED");
    assert!(json["experiments"][0]["verified"]["latest"].is_null(), "no verification shown for a tampered folder");
}

#[test]
fn card_repairs_a_folder_whose_only_difference_is_a_rendered_file() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let card = std::fs::read(folder.join("card.md")).unwrap();
    // A `card --templates` killed after writing the card and a figure's temporary, before the seal.
    std::fs::write(folder.join("card.md"), "# a card from other templates\n").unwrap();
    std::fs::write(folder.join("figures/.training-curves.svg.tmp-4242-0"), "<svg").unwrap();
    let refused = run_in(d, &["predict", folder.to_str().unwrap(), "leases.parquet", "--out", "s.csv"]);
    assert_eq!(refused.status.code(), Some(6), "{}", stderr(&refused));
    let out = run_in(d, &["card", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).starts_with("repaired: the evidence matches its list"), "{}", stdout(&out));
    assert_eq!(std::fs::read(folder.join("card.md")).unwrap(), card, "rendered anew, byte for byte");
    assert!(!folder.join("figures/.training-curves.svg.tmp-4242-0").exists());
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]);
    assert!(out.status.success(), "{}", stdout(&out));
    // Evidence is never repaired.
    let plan = folder.join("plan.json");
    let mut bytes = std::fs::read(&plan).unwrap();
    bytes.push(b' ');
    std::fs::write(&plan, bytes).unwrap();
    let out = run_in(d, &["card", folder.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(6), "{}", stderr(&out));
}

#[test]
fn verify_on_a_read_only_store_prints_its_verdict_then_warns() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    // A read-only verifications log stands for a read-only store (root ignores mode bits on
    // folders, not on a file replaced by a folder of the same name).
    std::fs::create_dir(d.join("results/verifications.jsonl")).unwrap();
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]);
    assert_eq!(out.status.code(), Some(0), "{}{}", stdout(&out), stderr(&out));
    let text = stdout(&out);
    let verdict = text.find("verdict   verified").expect("verdict printed");
    let warning = text.find("warning   this verification could not be recorded in verifications.jsonl").expect("warning printed");
    assert!(verdict < warning, "{text}");
}

#[test]
fn worker_counts_are_capped_and_zero_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 200, "");
    let out = run_in(d, &["train", manifest.to_str().unwrap(), "--jobs", "0"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("--jobs 0"), "{}", stderr(&out));
    let (status, err) = {
        let mut cmd = bin();
        cmd.current_dir(d).args(["train", manifest.to_str().unwrap(), "--results", "results", "--jobs", "100000", "--quiet"]);
        let started = Instant::now();
        let out = cmd.output().unwrap();
        assert!(started.elapsed() < Duration::from_secs(300));
        (out.status.code(), stderr(&out))
    };
    assert_eq!(status, Some(0), "{err}");
    let folder = experiment_folder(&d.join("results")).unwrap();
    let timing: serde_json::Value = serde_json::from_slice(&std::fs::read(folder.join("timing.json")).unwrap()).unwrap();
    let cores = std::thread::available_parallelism().unwrap().get() as u64;
    assert!(timing["jobs"].as_u64().unwrap() <= cores.min(5), "{}", timing["jobs"]);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(!card.contains(" 0 worker(s)") && !card.contains("100000 worker"), "the card states the workers used");
}

#[test]
fn bad_paths_are_bad_input_named_where_they_are_set() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("m.toml"), manifest("")).unwrap();
    let out = run_in(d, &["check", "m.toml"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).starts_with("error: m.toml:5:"), "line of data.path: {}", stderr(&out));
    assert!(stderr(&out).contains("key `data.path`") && stderr(&out).contains("data.parquet: no such file"), "{}", stderr(&out));
    for args in [vec!["check", "missing.toml"], vec!["train", "missing.toml"]] {
        let out = run_in(d, &args);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
        assert!(stderr(&out).contains("missing.toml: no such manifest file"), "{}", stderr(&out));
    }
    std::fs::write(d.join("latin1.toml"), b"[experiment]\nname = \"caf\xe9\"\n").unwrap();
    let out = run_in(d, &["check", "latin1.toml"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("latin1.toml:2: is not UTF-8 text"), "{}", stderr(&out));
    // A FIFO as the data file: refused at once, never read (a read would block forever).
    let fifo = d.join("data.parquet");
    assert!(Command::new("mkfifo").arg(&fifo).status().unwrap().success());
    let (status, err) = run_within(d, &["check", "m.toml"], Duration::from_secs(20));
    assert!(status.is_some(), "check waited on a FIFO");
    assert_eq!(status, Some(2), "{err}");
    assert!(err.contains("is not a regular file"), "{err}");
}

#[test]
fn every_common_parquet_codec_reads_to_the_same_content() {
    use parquet::arrow::ArrowWriter;
    use parquet::basic::{BrotliLevel, Compression, GzipLevel, ZstdLevel};
    use parquet::file::properties::WriterProperties;
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let columns = tabcard::demo::lease_defaults(500, 7);
    let batch = arrow::record_batch::RecordBatch::try_from_iter(columns).unwrap();
    std::fs::write(d.join("m.toml"), manifest("").replace("target = \"y\"", "target = \"defaulted_12m\"")).unwrap();
    let mut content = Vec::new();
    for codec in [
        Compression::UNCOMPRESSED,
        Compression::SNAPPY,
        Compression::ZSTD(ZstdLevel::default()),
        Compression::GZIP(GzipLevel::default()),
        Compression::LZ4,
        Compression::LZ4_RAW,
        Compression::BROTLI(BrotliLevel::default()),
    ] {
        let mut bytes = Vec::new();
        let props = WriterProperties::builder().set_compression(codec).build();
        let mut writer = ArrowWriter::try_new(&mut bytes, batch.schema(), Some(props)).unwrap();
        writer.write(&batch).unwrap();
        writer.close().unwrap();
        std::fs::write(d.join("data.parquet"), &bytes).unwrap();
        let out = run_in(d, &["check", "m.toml", "--json"]);
        assert!(out.status.success(), "{codec:?}: {}", stderr(&out));
        let report: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        content.push((format!("{codec:?}"), report["data"]["content_sha256"].as_str().unwrap().to_string()));
    }
    assert!(content.iter().all(|(_, c)| *c == content[0].1), "one content hash across codecs: {content:?}");
}

#[test]
fn a_resumed_train_clears_temporaries_of_interrupted_writes() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    // Killed after writing the selection, before the seal: a temporary of the card and of a figure.
    std::fs::remove_file(folder.join("integrity.sha256")).unwrap();
    std::fs::write(folder.join(".card.md.tmp-4242-0"), "half").unwrap();
    std::fs::write(folder.join("figures/.grid.svg.tmp-4242-1"), "<sv").unwrap();
    let out = train(d, &manifest);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(!folder.join(".card.md.tmp-4242-0").exists() && !folder.join("figures/.grid.svg.tmp-4242-1").exists());
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]);
    assert!(out.status.success(), "{}", stdout(&out));
}

#[test]
fn predict_counts_never_missing_columns_it_imputes_and_refuses_clashing_ids() {
    use arrow::array::{Array, ArrayRef, Float64Array};
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 300, "");
    let folder = trained(d, &manifest);
    let mut columns = tabcard::demo::lease_defaults(6, 7);
    for (name, array) in columns.iter_mut() {
        if name == "collateral_cover" {
            *array = std::sync::Arc::new(Float64Array::from(vec![None::<f64>; 6])) as ArrayRef;
            assert_eq!(array.null_count(), 6);
        }
    }
    std::fs::write(d.join("new.parquet"), tabcard::data::parquet::encode(columns, Default::default()).unwrap()).unwrap();
    let out = run_in(d, &["predict", folder.to_str().unwrap(), "new.parquet", "--out", "s.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(
        stdout(&out).contains("imputed   6 rows of `collateral_cover` have no value (every row: check the input's export), though it was never missing in training"),
        "{}",
        stdout(&out)
    );
    // An id named like an output column is refused when the manifest is checked.
    let clash = std::fs::read_to_string(&manifest).unwrap().replace("ids = [\"application_id\"]", "ids = [\"decision\"]");
    std::fs::write(d.join("clash.toml"), clash).unwrap();
    let out = run_in(d, &["check", "clash.toml"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("key `data.ids[0]`: `decision` clashes with the name of one of predict's output columns"),
        "{}",
        stderr(&out)
    );
}

#[test]
fn slurm_refuses_values_that_would_break_out_of_sbatch_lines() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 200, "");
    let m = manifest.to_str().unwrap();
    for (args, expect) in [
        (vec!["--results", "my results"], "--results"),
        (vec!["--results", "r\n#SBATCH --wrap=rm"], "--results"),
        (vec!["--partition", "cpu\necho pwned"], "--partition"),
        (vec!["--account", "lab account"], "--account"),
        (vec!["--mem", "4G --wrap=x"], "--mem"),
        (vec!["--time", "1:00 x"], "--time"),
    ] {
        let mut all = vec!["slurm", m];
        all.extend(args.iter());
        let out = run_in(d, &all);
        assert_eq!(out.status.code(), Some(2), "{args:?}: {}", stderr(&out));
        assert!(stderr(&out).starts_with(&format!("error: {expect} ")), "{args:?}: {}", stderr(&out));
    }
    assert!(!d.join("my results").exists() && !d.join("results").exists(), "nothing written");
    let out = run_in(d, &["slurm", m, "--partition", "cpu,gpu-short", "--account", "lab_1", "--mem", "4096M", "--time", "1-00:00:00"]);
    assert!(out.status.success(), "{}", stderr(&out));
}

#[test]
fn files_that_once_made_the_parquet_crate_panic_give_one_line_errors() {
    // Files that made the parquet crate panic (fuzzing found them); each is a clean error only.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    std::fs::write(d.join("m.toml"), manifest("")).unwrap();
    let regressions = repo_path("tests/fuzz/regressions/parquet_load");
    let mut seen = 0;
    for entry in std::fs::read_dir(regressions).unwrap() {
        std::fs::copy(entry.unwrap().path(), d.join("data.parquet")).unwrap();
        let out = run_in(d, &["check", "m.toml"]);
        assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
        assert!(!stderr(&out).contains("panicked") && !stderr(&out).contains("backtrace"), "{}", stderr(&out));
        assert_eq!(stderr(&out).lines().count(), 1, "{}", stderr(&out));
        seen += 1;
    }
    assert!(seen >= 3);
}

#[test]
fn a_forged_and_resealed_reference_profile_is_caught_by_verify() {
    // A forger who moves a decile edge of profile.json (so that a drifting batch would read
    // stable) and rewrites the integrity list changes the results digest, and verify, which
    // re-derives the profile from the training rows, names the file.
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 600, "");
    let folder = trained(d, &manifest);
    let path = folder.join("profile.json");
    let mut profile: serde_json::Value = serde_json::from_slice(&std::fs::read(&path).unwrap()).unwrap();
    let edges = profile["features"][0]["bins"]["edges"].as_array_mut().unwrap();
    let first = edges[0].as_f64().unwrap();
    edges[0] = (first - 1.0).into();
    std::fs::write(&path, serde_json::to_vec_pretty(&profile).unwrap()).unwrap();
    reseal(&folder);
    let out = run_in(d, &["verify", folder.to_str().unwrap(), "--quiet"]);
    assert_eq!(out.status.code(), Some(6), "{}{}", stdout(&out), stderr(&out));
    assert!(stdout(&out).contains("profile.json does not match the reference population"), "{}", stdout(&out));
}
