//! Signed reviews, checked against Debian's OpenSSH client (`ssh-keygen`, package openssh-client,
//! which `.ci/run` installs): a review tabcard signs verifies with `ssh-keygen -Y verify`;
//! Ed25519, ECDSA and RSA signatures `ssh-keygen -Y sign` makes over tabcard's statement verify in
//! tabcard; the allowed-signers parser accepts and refuses what `ssh-keygen` accepts and refuses.
//! Every kind of broken review is named, none blocks `predict`, and the evidence digest never
//! moves. The SSHSIG format is OpenSSH's PROTOCOL.sshsig; the allowed-signers format is
//! ssh-keygen(1), "ALLOWED SIGNERS".

mod common;

use common::*;
use std::path::{Path, PathBuf};
use std::process::Command;

use tabcard::review::allowed_signers::{Acceptance, AllowedSigners};
use tabcard::review::judge::{judge_folder, Judgement};

fn ssh_keygen(dir: &Path, args: &[&str], stdin: Option<&Path>) -> std::process::Output {
    let mut cmd = Command::new("ssh-keygen");
    cmd.current_dir(dir).args(args).env("TZ", "UTC");
    if let Some(file) = stdin {
        cmd.stdin(std::fs::File::open(file).unwrap());
    }
    cmd.output().expect("ssh-keygen (Debian package openssh-client; .ci/run installs it)")
}

/// A new key pair `dir/name` (and `name.pub`) of `kind` (`ed25519`, `rsa`, `ecdsa`).
fn keypair(dir: &Path, name: &str, kind: &str) -> String {
    let mut args = vec!["-q", "-t", kind, "-N", "", "-C", name, "-f", name];
    if kind == "rsa" {
        args.extend(["-b", "3072"]);
    }
    let out = ssh_keygen(dir, &args, None);
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    let public = std::fs::read_to_string(dir.join(format!("{name}.pub"))).unwrap();
    public.split_whitespace().take(2).collect::<Vec<_>>().join(" ")
}

fn tabcard(dir: &Path, args: &[&str]) -> (Option<i32>, String, String) {
    let out = run_in(dir, args);
    (out.status.code(), stdout(&out), stderr(&out))
}

/// The digest of the evidence, as the folder's integrity.sha256 seals it.
fn digest_of(folder: &Path) -> String {
    tabcard::store::Layout::new(folder).check_sealed().unwrap()
}

/// A statement written by tabcard and signed by ssh-keygen with `key`, attached with tabcard.
fn review_signed_by_ssh_keygen(dir: &Path, folder: &str, key: &str, signer: &str, role: &str, decision: &str) -> String {
    let statement = format!("{key}-statement.json");
    let (code, out, err) =
        tabcard(dir, &["review", folder, "--role", role, "--decision", decision, "--signer", signer, "--statement-out", &statement]);
    assert_eq!(code, Some(0), "{out}{err}");
    assert!(out.contains(&format!("ssh-keygen -Y sign -n tabcard-review -f <your key> {statement}")), "{out}");
    let signed = ssh_keygen(dir, &["-Y", "sign", "-n", "tabcard-review", "-f", key, &statement], None);
    assert!(signed.status.success(), "{}", String::from_utf8_lossy(&signed.stderr));
    let (code, out, err) = tabcard(dir, &["review", folder, "--statement", &statement, "--signature", &format!("{statement}.sig")]);
    assert_eq!(code, Some(0), "{out}{err}");
    out
}

fn record_dirs(folder: &Path) -> Vec<PathBuf> {
    let mut dirs: Vec<PathBuf> = std::fs::read_dir(folder.join("reviews")).unwrap().map(|e| e.unwrap().path()).collect();
    dirs.sort();
    dirs
}

fn problems(judged: &[Judgement]) -> Vec<String> {
    judged.iter().flat_map(|j| j.problems.iter().map(|p| p.name().to_string())).collect()
}

/// Rewrites a record's own list after its files were edited, as someone covering their tracks would.
fn reseal_record(record: &Path) {
    let mut list = String::new();
    let mut names: Vec<String> = std::fs::read_dir(record)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n != "contents.sha256")
        .collect();
    names.sort();
    for name in names {
        let bytes = std::fs::read(record.join(&name)).unwrap();
        list.push_str(&format!("{}  {name}\n", tabcard::fingerprint::sha256_hex(&bytes)));
    }
    std::fs::write(record.join("contents.sha256"), list).unwrap();
}

#[test]
fn signed_reviews_interoperate_with_ssh_keygen_and_never_touch_the_evidence() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 2000, "");
    let folder = trained(d, &manifest);
    let folder_arg = folder.strip_prefix(d).unwrap().to_str().unwrap().to_string();
    let before = digest_of(&folder);
    let card_before = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card_before.contains("No review is recorded. This card describes the model; it is not an approval."));

    let ana = keypair(d, "ana", "ed25519");
    let dev = keypair(d, "dev", "ed25519");
    let bo = keypair(d, "bo", "rsa");
    let cy = keypair(d, "cy", "ecdsa");
    std::fs::write(
        d.join("results/allowed_signers"),
        format!(
            "# risk team\nana@risk.example {ana}\ndev@risk.example namespaces=\"tabcard-review,git\" {dev}\nbo@risk.example {bo}\ncy@risk.example valid-after=\"20200101\" {cy}\n"
        ),
    )
    .unwrap();

    // tabcard signs (Ed25519); ssh-keygen verifies it.
    let (code, out, err) = tabcard(
        d,
        &[
            "review",
            &folder_arg,
            "--role",
            "validator",
            "--decision",
            "approved-with-conditions",
            "--conditions",
            "re-validate once 3 monthly batches are monitored",
            "--valid-until",
            "2099-12-31",
            "--signer",
            "ana@risk.example",
            "--key",
            "ana",
        ],
    );
    assert_eq!(code, Some(0), "{out}{err}");
    assert!(
        out.contains("check      validator ana@risk.example approved-with-conditions on ")
            && out.contains(": holds, valid until 2099-12-31"),
        "{out}"
    );
    assert!(out.contains("evidence   unchanged: results digest"), "{out}");
    let record = record_dirs(&folder).pop().unwrap();
    let ssh_verify = |namespace: &str| {
        let sig = record.join("statement.json.sig");
        let args =
            ["-Y", "verify", "-f", "results/allowed_signers", "-I", "ana@risk.example", "-n", namespace, "-s", sig.to_str().unwrap()];
        ssh_keygen(d, &args, Some(&record.join("statement.json")))
    };
    let verified = ssh_verify("tabcard-review");
    assert!(verified.status.success(), "ssh-keygen -Y verify: {}", String::from_utf8_lossy(&verified.stderr));
    assert!(String::from_utf8_lossy(&verified.stdout).contains("Good \"tabcard-review\" signature for ana@risk.example"));
    let other_ns = ssh_verify("file");
    assert!(!other_ns.status.success(), "ssh-keygen refuses the signature in another namespace too");

    // ssh-keygen signs with Ed25519, RSA and ECDSA keys; tabcard verifies.
    review_signed_by_ssh_keygen(d, &folder_arg, "dev", "dev@risk.example", "developer", "approved");
    review_signed_by_ssh_keygen(d, &folder_arg, "bo", "bo@risk.example", "approver", "approved");
    review_signed_by_ssh_keygen(d, &folder_arg, "cy", "cy@risk.example", "validator", "approved");
    assert_eq!(record_dirs(&folder).len(), 4);

    // The evidence digest never moved; verify, predict and card work; the card shows the reviews.
    assert_eq!(digest_of(&folder), before);
    let (code, out, err) = tabcard(d, &["verify", &folder_arg]);
    assert_eq!(code, Some(0), "{out}{err}");
    assert!(out.contains("reviews   4 of 4 hold (checked against signers from results/allowed_signers):"), "{out}");
    assert!(out.contains("approver bo@risk.example approved on ") && out.contains("card      matches"), "{out}");
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(
        card.contains("| validator | approved-with-conditions: re-validate once 3 monthly batches are monitored | 2099-12-31 |"),
        "{card}"
    );
    assert_eq!(card.matches("@risk.example |").count(), 4, "{card}");
    assert_eq!(
        tabcard::review::statement::card_sha256(&card),
        tabcard::review::statement::card_sha256(&card_before),
        "the card above its review section is what every reviewer read"
    );
    let (code, out, err) = tabcard(d, &["card", &folder_arg]);
    assert_eq!(code, Some(0), "{out}{err}");
    assert_eq!(std::fs::read_to_string(folder.join("card.md")).unwrap(), card, "card renders the same reviews");
    std::fs::write(d.join("batch.parquet"), std::fs::read(d.join("leases.parquet")).unwrap()).unwrap();
    let (code, out, err) = tabcard(d, &["predict", &folder_arg, "batch.parquet", "--out", "scores.csv"]);
    assert_eq!(code, Some(0), "{out}{err}");
    let (code, out, err) = tabcard(d, &["history", "--results", "results"]);
    assert_eq!(code, Some(0), "{out}{err}");
    assert!(out.contains("4 hold"), "{out}");

    // A review signed by the developer's key as approver breaks the separation of duties.
    let (code, out, err) = tabcard(
        d,
        &["review", &folder_arg, "--role", "approver", "--decision", "approved", "--signer", "dev@risk.example", "--key", "dev"],
    );
    assert_eq!(code, Some(0), "{out}{err}");
    assert!(out.contains("SEPARATION OF DUTIES: the key that signed as approver also signed as developer"), "{out}");
    let (code, out, _) = tabcard(d, &["verify", &folder_arg, "--json"]);
    assert_eq!(code, Some(10), "the bits reproduce, a review does not hold: exit 10\n{out}");
    let v: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["identical"], true);
    assert_eq!(v["reviews_hold"], false);
}

#[test]
fn every_broken_review_is_named_and_none_blocks_predict() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 1500, "");
    let folder = trained(d, &manifest);
    let folder_arg = folder.strip_prefix(d).unwrap().to_str().unwrap().to_string();
    let ana = keypair(d, "ana", "ed25519");
    keypair(d, "eve", "ed25519");
    std::fs::write(d.join("results/allowed_signers"), format!("ana@risk.example {ana}\n")).unwrap();
    let review = |signer: &str, key: &str, extra: &[&str]| {
        let mut args = vec!["review", &folder_arg, "--role", "validator", "--decision", "approved", "--signer", signer, "--key", key];
        args.extend_from_slice(extra);
        let (code, out, err) = tabcard(d, &args);
        assert_eq!(code, Some(0), "{out}{err}");
        record_dirs(&folder).into_iter().max_by_key(|p| std::fs::metadata(p).unwrap().modified().unwrap()).unwrap()
    };
    let good = review("ana@risk.example", "ana", &["--valid-until", "2099-12-31"]);
    let signers = AllowedSigners::read(&d.join("results/allowed_signers")).unwrap();
    let digest = tabcard::store::Layout::new(&folder).check_sealed().unwrap();
    let record: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(folder.join("experiment.json")).unwrap()).unwrap();
    let fingerprint = record["fingerprint"].as_str().unwrap().to_string();
    let today = tabcard::provenance::today_days();
    let judge = |folder: &Path, day: i64| judge_folder(folder, &fingerprint, &digest, &[], Some(&signers), day).unwrap();
    assert_eq!(problems(&judge(&folder, today)), Vec::<String>::new());

    // Expired: the same review judged on 2100-01-01.
    let later = tabcard::provenance::date_days("2100-01-01").unwrap();
    assert_eq!(problems(&judge(&folder, later)), vec!["expired"]);
    // The person who trained the experiment (timing record or manifest) cannot also validate it.
    let trainer = judge_folder(&folder, &fingerprint, &digest, &["ana@risk.example".to_string()], Some(&signers), today).unwrap();
    assert_eq!(problems(&trainer), vec!["separation of duties"]);
    assert!(trainer[0].describe().contains("ana@risk.example trained this experiment"), "{}", trainer[0].describe());
    // No allowed-signers file: nobody vouches for the key.
    let unchecked = judge_folder(&folder, &fingerprint, &digest, &[], None, today).unwrap();
    assert_eq!(problems(&unchecked), vec!["signer unchecked"]);

    // Each breakage in its own copy of the folder, judged by the library (verify is run once).
    let copy = |name: &str| {
        let to = d.join("results").join(name);
        copy_dir(&folder, &to);
        to
    };
    let only = |folder: &Path| {
        for r in record_dirs(folder) {
            if r.file_name() != good.file_name() {
                std::fs::remove_dir_all(r).unwrap();
            }
        }
    };
    let flip = |file: &Path, at: usize| {
        let mut bytes = std::fs::read(file).unwrap();
        bytes[at] ^= 0x01;
        std::fs::write(file, bytes).unwrap();
    };
    let good_name = good.file_name().unwrap().to_owned();

    // A flipped byte in the statement's signer, the list left as it was, then resealed.
    let statement_flip = copy("statement-flip");
    only(&statement_flip);
    let statement = statement_flip.join("reviews").join(&good_name).join("statement.json");
    let text = std::fs::read_to_string(&statement).unwrap();
    flip(&statement, text.find("\"ana@").unwrap() + 1);
    assert_eq!(problems(&judge(&statement_flip, today)), vec!["record changed"]);
    reseal_record(statement.parent().unwrap());
    assert_eq!(problems(&judge(&statement_flip, today)), vec!["bad signature"]);

    // A flipped byte inside the signature's base64 body, resealed.
    let signature_flip = copy("signature-flip");
    only(&signature_flip);
    let sig = signature_flip.join("reviews").join(&good_name).join("statement.json.sig");
    flip(&sig, 120);
    reseal_record(sig.parent().unwrap());
    assert_eq!(problems(&judge(&signature_flip, today)), vec!["bad signature"]);

    // A signature made for another namespace over the same statement, resealed.
    let namespace = copy("namespace");
    only(&namespace);
    let rec = namespace.join("reviews").join(&good_name);
    std::fs::remove_file(rec.join("statement.json.sig")).unwrap();
    let signed = ssh_keygen(d, &["-Y", "sign", "-n", "file", "-f", "ana", rec.join("statement.json").to_str().unwrap()], None);
    assert!(signed.status.success(), "{}", String::from_utf8_lossy(&signed.stderr));
    reseal_record(&rec);
    assert_eq!(problems(&judge(&namespace, today)), vec!["wrong namespace"]);

    // An unlisted signer, and a listed key under another name.
    let eve = review("eve@elsewhere.example", "eve", &[]);
    let named_differently = review("bo@risk.example", "ana", &[]);
    let judged = judge(&folder, today);
    let of = |record: &Path| judged.iter().find(|j| j.record == record.file_name().unwrap().to_str().unwrap()).unwrap().clone();
    assert_eq!(problems(&[of(&eve)]), vec!["unknown signer"]);
    assert_eq!(problems(&[of(&named_differently)]), vec!["signer mismatch"]);
    assert!(of(&named_differently).describe().contains("lists this key for ana@risk.example"), "{}", of(&named_differently).describe());

    // A review of another folder copied in.
    let other_dir = d.join("other");
    std::fs::create_dir_all(&other_dir).unwrap();
    let other_manifest = small_lease_experiment(&other_dir, 1200, "");
    let other = trained(&other_dir, &other_manifest);
    let (code, out, err) = tabcard(
        &other_dir,
        &[
            "review",
            other.to_str().unwrap(),
            "--role",
            "validator",
            "--decision",
            "approved",
            "--signer",
            "ana@risk.example",
            "--key",
            d.join("ana").to_str().unwrap(),
        ],
    );
    assert_eq!(code, Some(0), "{out}{err}");
    let foreign = copy("foreign");
    only(&foreign);
    let other_record = record_dirs(&other).pop().unwrap();
    copy_dir(&other_record, &foreign.join("reviews").join(other_record.file_name().unwrap()));
    let judged = judge(&foreign, today);
    assert_eq!(problems(&judged), vec!["another folder's review", "card changed after review"], "its card is the other folder's");

    // The card changed after review: rendered from the team's own template.
    let templates = d.join("templates");
    std::fs::create_dir_all(&templates).unwrap();
    let template = std::fs::read_to_string(repo_path("templates/card.md.tera")).unwrap().replace("## Provenance", "## Provenance (edited)");
    std::fs::write(templates.join("card.md.tera"), template).unwrap();
    let changed = copy("card-changed");
    only(&changed);
    let (code, out, err) = tabcard(d, &["card", changed.to_str().unwrap(), "--templates", templates.to_str().unwrap()]);
    assert_eq!(code, Some(0), "{out}{err}");
    assert_eq!(problems(&judge(&changed, today)), vec!["card changed after review"]);

    // None of them blocks predict, and verify names them and exits 10 (the bits reproduce).
    std::fs::write(d.join("batch.parquet"), std::fs::read(d.join("leases.parquet")).unwrap()).unwrap();
    for f in [&statement_flip, &signature_flip, &namespace, &foreign, &changed, &folder] {
        let (code, out, err) = tabcard(d, &["predict", f.to_str().unwrap(), "batch.parquet", "--out", "scores.csv", "--force"]);
        assert_eq!(code, Some(0), "{}: {out}{err}", f.display());
    }
    let (code, out, err) = tabcard(d, &["verify", &folder_arg]);
    assert_eq!(code, Some(10), "{out}{err}");
    assert!(out.contains("verdict   verified: every run reproduced bit for bit"), "{out}");
    assert!(out.contains("reviews   1 of 3 hold") && out.contains("UNKNOWN SIGNER") && out.contains("SIGNER MISMATCH"), "{out}");
}

/// The allowed-signers parser decides as `ssh-keygen -Y verify` does (TZ=UTC, since tabcard reads
/// timestamps without `Z` as UTC): same key, each principal, namespace and time.
#[test]
fn allowed_signers_decide_as_ssh_keygen_does() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let key = keypair(d, "k", "ed25519");
    let other = keypair(d, "o", "ed25519");
    let message = d.join("message");
    std::fs::write(&message, b"statement\n").unwrap();
    let signed = ssh_keygen(d, &["-Y", "sign", "-n", "tabcard-review", "-f", "k", "message"], None);
    assert!(signed.status.success());
    let sig = std::fs::read_to_string(d.join("message.sig")).unwrap();
    let file = format!(
        "# comment\n\n*@risk.example,!eve@risk.example namespaces=\"tabcard-review\" {key} laptop\n\
         ana@lab.example namespaces=\"git,file\" {key}\n\
         bo@lab.example valid-after=\"20260101\",valid-before=\"202606302359Z\" {key}\n\
         cy@lab.example {other}\n\
         dy@lab.example,ana?@lab.example valid-before=\"20250101120000\" {key}\n"
    );
    std::fs::write(d.join("allowed"), &file).unwrap();
    let signers = AllowedSigners::read(&d.join("allowed")).unwrap();
    let public = tabcard::review::signature::verify(b"statement\n", &sig).unwrap();
    let principals = [
        "ana@risk.example",
        "eve@risk.example",
        "ana@lab.example",
        "bo@lab.example",
        "cy@lab.example",
        "dy@lab.example",
        "anaX@lab.example",
    ];
    let times = ["20241231", "20250101120000", "20250101120001", "20260101", "20260315", "20260630235900", "20260701"];
    let mut agreed = 0;
    for principal in principals {
        for time in times {
            let at = {
                let t = format!("{time:0<14}");
                tabcard::provenance::rfc3339_seconds(&format!(
                    "{}-{}-{}T{}:{}:{}Z",
                    &t[..4],
                    &t[4..6],
                    &t[6..8],
                    &t[8..10],
                    &t[10..12],
                    &t[12..14]
                ))
                .unwrap()
            };
            let ours = matches!(signers.accepts(&public, principal, "tabcard-review", at), Acceptance::Accepted { .. });
            let theirs = ssh_keygen(
                d,
                &[
                    "-Y",
                    "verify",
                    "-f",
                    "allowed",
                    "-I",
                    principal,
                    "-n",
                    "tabcard-review",
                    "-s",
                    "message.sig",
                    "-O",
                    &format!("verify-time={time}"),
                ],
                Some(&message),
            )
            .status
            .success();
            assert_eq!(ours, theirs, "{principal} at {time}: tabcard {ours}, ssh-keygen {theirs}");
            agreed += 1;
        }
    }
    assert_eq!(agreed, 49);
    // find-principals lists the same principals for the key (at the current time).
    let found = ssh_keygen(d, &["-Y", "find-principals", "-f", "allowed", "-s", "message.sig"], None);
    let theirs: Vec<String> = String::from_utf8_lossy(&found.stdout).lines().map(String::from).collect();
    let now = std::time::SystemTime::now().duration_since(std::time::UNIX_EPOCH).unwrap().as_secs() as i64;
    assert_eq!(signers.find_principals(&public, now), theirs, "find-principals");

    // What ssh-keygen refuses to read, tabcard refuses too, naming the line.
    for (bad, why) in [
        (format!("x@y valid-after=20260101 {key}\n"), "double quotes"),
        (format!("x@y valid-after=\"2026\" {key}\n"), "YYYYMMDD"),
        (format!("x@y bogus-option {key}\n"), "not an option"),
    ] {
        std::fs::write(d.join("bad"), &bad).unwrap();
        let theirs =
            ssh_keygen(d, &["-Y", "verify", "-f", "bad", "-I", "x@y", "-n", "tabcard-review", "-s", "message.sig"], Some(&message));
        assert!(!theirs.status.success(), "ssh-keygen accepts {bad}");
        let ours = AllowedSigners::read(&d.join("bad")).unwrap_err().to_string();
        assert!(ours.contains("bad:1:") && ours.contains(why), "{ours}");
    }
}

/// `[experiment] replaces`: with the replaced experiment's folder under the results root at
/// training, `compare`'s figures against it are recorded beside the evidence and shown in the
/// card; without it, the card says none was recorded.
#[test]
fn a_model_that_replaces_another_shows_the_comparison_recorded_at_training() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 1500, "");
    let old = trained(d, &manifest);
    let record: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(old.join("experiment.json")).unwrap()).unwrap();
    let old_fp = record["fingerprint"].as_str().unwrap().to_string();
    let text = std::fs::read_to_string(&manifest).unwrap();
    let successor = text
        .replace("name = \"small-lease\"", &format!("name = \"small-lease-2\"\nreplaces = \"{}\"", &old_fp[..20]))
        .replace("epochs = 6", "epochs = 8");
    std::fs::write(d.join("successor.toml"), successor).unwrap();
    let out = run_in(d, &["train", "successor.toml", "--results", "results", "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(
        stdout(&out).contains("replaces  ") && stdout(&out).contains("compared, recorded in comparisons/replaces-"),
        "{}",
        stdout(&out)
    );
    let new = std::fs::read_dir(d.join("results")).unwrap().map(|e| e.unwrap().path()).find(|p| p.is_dir() && *p != old).unwrap();
    let card = std::fs::read_to_string(new.join("card.md")).unwrap();
    assert!(card.contains("**Against the model it replaces.** Recorded at training by `tabcard compare`"), "{card}");
    assert!(card.contains("| metric | replaced model | this model | difference | judgement |"), "{card}");
    assert!(card.contains("| roc\\_auc | ") && card.contains("| within seed noise |"), "{card}");
    assert!(card.contains("On each model's test split, roc\\_auc: the replaced model "), "{card}");
    let out = run_in(d, &["verify", new.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(0), "{}{}", stdout(&out), stderr(&out));
    assert!(stdout(&out).contains("card      matches"), "{}", stdout(&out));

    // Without the replaced folder at training, the card says so.
    let elsewhere = d.join("elsewhere");
    std::fs::create_dir_all(&elsewhere).unwrap();
    std::fs::copy(d.join("leases.parquet"), elsewhere.join("leases.parquet")).unwrap();
    std::fs::copy(d.join("successor.toml"), elsewhere.join("successor.toml")).unwrap();
    let out = run_in(&elsewhere, &["train", "successor.toml", "--results", "results", "--jobs", "2"]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert!(stdout(&out).contains("no such results folder under results, so no comparison was recorded"), "{}", stdout(&out));
    let folder = experiment_folder(&elsewhere.join("results")).unwrap();
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("was not under the results root when this model was trained, so no comparison was recorded"), "{card}");
}
