//! `predict` never overwrites evidence and writes the format its `--out` extension names: an
//! existing file only with `--force`, never the input table, never a path inside a results store,
//! and an unknown extension is refused; Parquet and CSV outputs read back to the same values.

mod common;

use common::*;
use std::path::Path;

fn predict(dir: &Path, folder: &Path, input: &str, out: &str, extra: &[&str]) -> std::process::Output {
    let mut args = vec!["predict", folder.to_str().unwrap(), input, "--out", out];
    args.extend_from_slice(extra);
    run_in(dir, &args)
}

/// Asserts a usage error (exit 2) whose one line is `expected`, and that `untouched` kept its bytes.
fn refused(out: &std::process::Output, expected: &str, untouched: &Path, before: &[u8]) {
    assert_eq!(out.status.code(), Some(2), "{}", stderr(out));
    assert_eq!(stderr(out).trim_end(), format!("error: {expected}"));
    assert_eq!(std::fs::read(untouched).unwrap(), before, "{} was changed", untouched.display());
}

#[test]
fn predict_refuses_to_overwrite_evidence_and_writes_the_named_format() {
    let dir = tempfile::tempdir().unwrap();
    let manifest = small_lease_experiment(dir.path(), 600, "");
    let folder = trained(dir.path(), &manifest);
    let d = dir.path();

    // Parquet and CSV, read back: the same rows and bit-identical probabilities.
    let out = predict(d, &folder, "leases.parquet", "scored.parquet", &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    let out = predict(d, &folder, "leases.parquet", "scored.CSV", &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    let parquet = tabcard::data::parquet::read_table(&d.join("scored.parquet")).unwrap();
    let csv = std::fs::read_to_string(d.join("scored.CSV")).unwrap();
    assert!(!csv.starts_with("PAR1"), "a .csv output is text, not Parquet");
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert_eq!(header, ["application_id", "p_true", "predicted", "outside_training_range"]);
    let p = parquet.column("p_true").unwrap();
    let rows: Vec<&str> = lines.collect();
    assert_eq!(rows.len(), 600);
    for (r, line) in rows.iter().enumerate() {
        let fields: Vec<&str> = line.split(',').collect();
        let value: f64 = fields[1].parse().unwrap();
        assert_eq!(value.to_bits(), p.number(r).unwrap().to_bits(), "row {r}");
    }

    // An existing file: refused without --force, replaced with it.
    let existing = d.join("scored.parquet");
    let before = std::fs::read(&existing).unwrap();
    refused(
        &predict(d, &folder, "leases.parquet", "scored.parquet", &[]),
        "--out scored.parquet exists; pass --force to replace it",
        &existing,
        &before,
    );
    let out = predict(d, &folder, "leases.parquet", "scored.parquet", &["--force"]);
    assert!(out.status.success(), "{}", stderr(&out));

    // The input table, even with --force.
    let input = d.join("leases.parquet");
    let before = std::fs::read(&input).unwrap();
    refused(
        &predict(d, &folder, "leases.parquet", "leases.parquet", &["--force"]),
        "--out leases.parquet is the input table; write the predictions to another file",
        &input,
        &before,
    );

    // Anything inside a results store, even with --force: a run's weights, the card, a new file
    // in the experiment folder, a file beside the ledger.
    let selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(folder.join("selection.json")).unwrap()).unwrap();
    let run = folder.join("runs").join(selection["selected_run"].as_str().unwrap());
    let weights = run.join("weights.safetensors");
    for (target, store) in
        [(weights.clone(), folder.clone()), (folder.join("card.md"), folder.clone()), (folder.join("new.csv"), folder.clone())]
    {
        let target_text = target.to_str().unwrap().to_string();
        let out = predict(d, &folder, "leases.parquet", &target_text, &["--force"]);
        assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
        let store = store.canonicalize().unwrap();
        assert_eq!(
            stderr(&out).trim_end(),
            format!("error: --out {target_text} is inside the results store {}, whose files are the audit trail; write the predictions elsewhere", store.display())
        );
    }
    let out = predict(d, &folder, "leases.parquet", "results/p.parquet", &[]);
    assert!(
        stderr(&out).contains("is inside the results store")
            && stderr(&out).ends_with(&format!(
                "{}, whose files are the audit trail; write the predictions elsewhere\n",
                d.join("results").canonicalize().unwrap().display()
            )),
        "{}",
        stderr(&out)
    );
    assert!(!folder.join("new.csv").exists() && !d.join("results/p.parquet").exists());

    // The extension must name the format.
    let out = predict(d, &folder, "leases.parquet", "scored.txt", &[]);
    assert_eq!(out.status.code(), Some(2));
    assert_eq!(stderr(&out).trim_end(), "error: --out scored.txt: the extension names the format written: `.parquet` or `.csv`");
    assert!(!d.join("scored.txt").exists());
}
