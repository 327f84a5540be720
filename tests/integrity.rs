//! One digest over every stored file of a results folder (`integrity.sha256`): a byte changed in
//! any file kind is caught by `verify` (exit 6, the file named), and `card`, `compare` and
//! `predict` refuse the folder; `sha256sum -c` (coreutils) checks the same list on its own; the
//! card and the ledger carry the results digest; a rewritten list is caught by re-deriving the
//! selection and by the ledger's digest. Regression for: an edited test roc_auc in selection.json
//! passed `card`, `verify` and `compare`.

mod common;

use common::*;
use std::path::Path;
use std::process::Command;

/// The paths `integrity.sha256` lists, in order.
/// Every file the folder's two lists name: the evidence (`integrity.sha256`), then the records
/// and rendered files (`records.sha256`).
fn listed(folder: &Path) -> Vec<String> {
    ["integrity.sha256", "records.sha256"]
        .iter()
        .flat_map(|list| {
            std::fs::read_to_string(folder.join(list))
                .unwrap()
                .lines()
                .map(|l| l.split_once("  ").unwrap().1.to_string())
                .collect::<Vec<_>>()
        })
        .collect()
}

fn sha256sum_check(folder: &Path) -> Option<bool> {
    Command::new("sha256sum")
        .args(["-c", "--quiet", "--strict", "integrity.sha256", "records.sha256"])
        .current_dir(folder)
        .output()
        .ok()
        .map(|o| o.status.success())
}

#[test]
fn every_stored_file_is_under_one_digest_and_tampering_is_named() {
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 400, "");
    let folder = trained(d, &manifest).canonicalize().unwrap();
    let paths = listed(&folder);
    for must in [
        "manifest.json",
        "manifest.source.toml",
        "experiment.json",
        "data-summary.json",
        "plan.json",
        "preprocessor.json",
        "selection.json",
        "format.json",
        "card.md",
    ] {
        assert!(paths.iter().any(|p| p == must), "{must} is listed");
    }
    assert!(paths.iter().any(|p| p.starts_with("figures/")) && paths.iter().any(|p| p.ends_with("/weights.safetensors")));
    assert!(!paths.iter().any(|p| p.ends_with("timing.json")), "timing records are left out");

    // Records of place and machine are listed, outside the evidence.
    let evidence = std::fs::read_to_string(folder.join("integrity.sha256")).unwrap();
    let records = std::fs::read_to_string(folder.join("records.sha256")).unwrap();
    for record in ["  location.json", "/environment.json", "  card.md"] {
        assert!(!evidence.lines().any(|l| l.ends_with(record)), "{record} is outside the evidence");
        assert!(records.lines().any(|l| l.ends_with(record)), "{record} is in records.sha256");
    }
    assert!(paths.iter().any(|p| p == "test-predictions.csv"), "the test split's predictions are evidence");

    // The digest: SHA-256 of the evidence list, named by the card and the ledger.
    let digest = tabcard::fingerprint::file_sha256(&folder.join("integrity.sha256")).unwrap();
    let lists = |f: &Path| ["integrity.sha256", "records.sha256"].map(|l| std::fs::read_to_string(f.join(l)).unwrap());
    let sealed_lists = lists(&folder);
    assert!(std::fs::read_to_string(folder.join("card.md")).unwrap().contains(&format!("`{digest}`")));
    let ledger = std::fs::read_to_string(d.join("results/ledger.jsonl")).unwrap();
    let last: serde_json::Value = serde_json::from_str(ledger.lines().last().unwrap()).unwrap();
    assert_eq!(last["results_digest"], digest.as_str());
    if let Some(ok) = sha256sum_check(&folder) {
        assert!(ok, "sha256sum -c passes on a fresh folder");
    }

    // One byte changed in each listed file in turn, in a copy of the folder.
    let copy = d.join("copies").join("tampered");
    for path in &paths {
        let _ = std::fs::remove_dir_all(&copy);
        copy_dir(&folder, &copy);
        let file = copy.join(path);
        let mut bytes = std::fs::read(&file).unwrap();
        let last = bytes.len() - 1;
        bytes[last] ^= 0x01;
        std::fs::write(&file, &bytes).unwrap();
        let expected = format!("error: {}: was changed after it was recorded", file.display());
        // `card` renders the card and figures anew from the evidence: an edited rendered file is
        // repaired there (tests/hostile.rs), an edited evidence file refused.
        let rendered = path == "card.md" || path.starts_with("figures/");
        for args in [
            vec!["verify", copy.to_str().unwrap()],
            vec!["card", copy.to_str().unwrap()],
            vec!["compare", folder.to_str().unwrap(), copy.to_str().unwrap()],
        ] {
            if rendered && args[0] == "card" {
                continue;
            }
            let out = run_in(d, &args);
            assert_eq!(out.status.code(), Some(6), "{args:?} after editing {path}: {}", stderr(&out));
            assert!(stderr(&out).starts_with(&expected), "{args:?} after editing {path}: {}", stderr(&out));
        }
        if let Some(ok) = sha256sum_check(&copy) {
            assert!(!ok, "sha256sum -c fails after editing {path}");
        }
        assert_eq!(std::fs::read(&file).unwrap(), bytes, "a refused command leaves {path} as it found it");
    }
    let out = run_in(d, &["predict", copy.to_str().unwrap(), "leases.parquet", "--out", "p.parquet"]);
    assert_eq!(out.status.code(), Some(6), "{}", stderr(&out));
    assert!(!d.join("p.parquet").exists());

    // A file added, a listed file removed, the list removed.
    let _ = std::fs::remove_dir_all(&copy);
    copy_dir(&folder, &copy);
    std::fs::write(copy.join("notes.txt"), "added").unwrap();
    let out = run_in(d, &["verify", copy.to_str().unwrap()]);
    assert_eq!(
        stderr(&out).trim_end(),
        format!(
            "error: {}: is not listed in integrity.sha256: it was added after the results were recorded",
            copy.join("notes.txt").display()
        )
    );
    std::fs::remove_file(copy.join("notes.txt")).unwrap();
    std::fs::remove_file(copy.join("plan.json")).unwrap();
    let out = run_in(d, &["card", copy.to_str().unwrap()]);
    assert_eq!(stderr(&out).trim_end(), format!("error: {}: is listed in integrity.sha256 but missing", copy.join("plan.json").display()));
    std::fs::remove_file(copy.join("integrity.sha256")).unwrap();
    let out = run_in(d, &["compare", folder.to_str().unwrap(), copy.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(6));
    assert!(stderr(&out).contains("integrity.sha256: is missing"), "{}", stderr(&out));

    // The untouched folder passes, and `card` re-renders it without moving the digest.
    let out = run_in(d, &["verify", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}{}", stdout(&out), stderr(&out));
    assert!(stdout(&out).contains("selection re-derived from the stored runs: matches selection.json"), "{}", stdout(&out));
    assert!(
        stdout(&out)
            .contains(&format!("digest    {digest}: every stored file matches integrity.sha256, and the ledger records this digest")),
        "{}",
        stdout(&out)
    );
    assert!(stdout(&out).contains("card      matches the card rendered from the stored evidence"), "{}", stdout(&out));
    let out = run_in(d, &["card", folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));
    assert_eq!(lists(&folder), sealed_lists, "re-rendering the card changes no line");
    // Timing records are outside the list: they may change without breaking the seal.
    std::fs::write(folder.join("timing.json"), "{}\n").unwrap();
    let out = run_in(d, &["compare", folder.to_str().unwrap(), folder.to_str().unwrap()]);
    assert!(out.status.success(), "{}", stderr(&out));

    // A forger who edits the test metric and rewrites the list: the digest no longer matches the
    // ledger's, and the selection re-derived from the runs does not match selection.json.
    let selection_path = folder.join("selection.json");
    let mut selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&selection_path).unwrap()).unwrap();
    selection["test"]["metrics"]["roc_auc"] = serde_json::json!(0.9373);
    std::fs::write(&selection_path, serde_json::to_string_pretty(&selection).unwrap() + "\n").unwrap();
    tabcard::store::integrity::seal(&folder, |_| Ok(())).unwrap();
    let out = run_in(d, &["verify", folder.to_str().unwrap()]);
    assert_eq!(out.status.code(), Some(6), "{}", stdout(&out));
    assert!(stdout(&out).contains("selection DIFFERS"), "{}", stdout(&out));
    assert!(
        stdout(&out).contains(&format!("DIFFERS from the ledger's {digest}: integrity.sha256 was rewritten after training")),
        "{}",
        stdout(&out)
    );
}
