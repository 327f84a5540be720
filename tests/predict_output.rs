//! `predict` never overwrites evidence and writes the format its `--out` extension names: an
//! existing file only with `--force`, never the input table, never a path inside a results store,
//! and an unknown extension is refused; Parquet and CSV outputs read back to the same values.

mod common;

use common::*;
use std::path::Path;

/// The scoring-output schema, version 2, for the lease test table (no interval columns: binary) (README, "Scoring output"):
/// names in order and Arrow types, as a Parquet reader sees them.
const PARQUET_SCHEMA: &[(&str, &str)] = &[
    ("application_id", "Int64"),
    ("row", "Int64"),
    ("p_true", "Float64"),
    ("decision", "Utf8"),
    ("decision_threshold", "Float64"),
    ("decision_favourable", "Boolean"),
    ("outside_training_range", "Boolean"),
    ("outside_range_columns", "Utf8"),
    ("imputed_columns", "Utf8"),
    ("unseen_level_columns", "Utf8"),
];

/// The CSV form adds what the Parquet form keeps as key-value metadata.
const CSV_HEADER: &[&str] = &[
    "application_id",
    "row",
    "p_true",
    "decision",
    "decision_threshold",
    "decision_favourable",
    "outside_training_range",
    "outside_range_columns",
    "imputed_columns",
    "unseen_level_columns",
    "model_id",
    "results_digest",
    "scoring_schema",
];

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
    assert_eq!(header, CSV_HEADER);
    let p = parquet.column("p_true").unwrap();
    let rows: Vec<&str> = lines.collect();
    assert_eq!(rows.len(), 600);
    for (r, line) in rows.iter().enumerate() {
        let fields: Vec<&str> = line.split(',').collect();
        let value: f64 = fields[2].parse().unwrap();
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

#[test]
fn predict_writes_the_documented_scoring_schema_with_the_deployed_decision() {
    use parquet::file::reader::FileReader;
    let dir = tempfile::tempdir().unwrap();
    let d = dir.path();
    let manifest = small_lease_experiment(d, 600, "");
    let text = std::fs::read_to_string(&manifest).unwrap()
        + "\n[decision]\nfavourable = \"false\"\nthreshold = \"expected_cost\"\ncost_false_positive = 1.0\ncost_false_negative = 4.0\n";
    std::fs::write(&manifest, text).unwrap();
    let folder = trained(d, &manifest);
    let out = predict(d, &folder, "leases.parquet", "scored.parquet", &[]);
    assert!(out.status.success(), "{}", stderr(&out));

    // Names, types and key-value metadata, read with the parquet crate's Arrow reader.
    let file = std::fs::File::open(d.join("scored.parquet")).unwrap();
    let builder = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(file).unwrap();
    let fields: Vec<(String, String)> =
        builder.schema().fields().iter().map(|f| (f.name().clone(), format!("{:?}", f.data_type()))).collect();
    let expected: Vec<(String, String)> = PARQUET_SCHEMA.iter().map(|(n, t)| (n.to_string(), t.to_string())).collect();
    assert_eq!(fields, expected);
    let reader = parquet::file::reader::SerializedFileReader::new(std::fs::File::open(d.join("scored.parquet")).unwrap()).unwrap();
    let meta: std::collections::BTreeMap<String, String> = reader
        .metadata()
        .file_metadata()
        .key_value_metadata()
        .unwrap()
        .iter()
        .filter(|kv| kv.key.starts_with("tabcard."))
        .map(|kv| (kv.key.clone(), kv.value.clone().unwrap_or_default()))
        .collect();
    let selection: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(folder.join("selection.json")).unwrap()).unwrap();
    let digest = tabcard::fingerprint::file_sha256(&folder.join("integrity.sha256")).unwrap();
    assert_eq!(meta["tabcard.scoring_schema"], "3");
    assert_eq!(meta["tabcard.model_id"], selection["selected_run"].as_str().unwrap());
    assert_eq!(meta["tabcard.results_digest"], digest);
    assert!(folder.file_name().unwrap().to_str().unwrap().starts_with(&meta["tabcard.experiment"][..16]));

    // The deployed threshold is the expected-cost one, 1 / (1 + 4) (Elkan 2001, Theorem 1), and
    // every decision follows it; "false" (no default) is the favourable outcome.
    let deployed = &selection["test"]["chosen_threshold"];
    assert_eq!(deployed["rule"], "expected_cost");
    assert_eq!(deployed["threshold"].as_f64().unwrap(), 0.2);
    let scored = tabcard::data::parquet::read_table(&d.join("scored.parquet")).unwrap();
    let (p, decision, favourable) =
        (scored.column("p_true").unwrap(), scored.column("decision").unwrap(), scored.column("decision_favourable").unwrap());
    let mut positives = 0;
    for r in 0..scored.rows {
        let positive = p.number(r).unwrap() >= 0.2;
        positives += usize::from(positive);
        assert_eq!(decision.label(r).unwrap(), if positive { "true" } else { "false" }, "row {r}");
        assert_eq!(favourable.label(r).unwrap(), if positive { "false" } else { "true" }, "row {r}");
    }
    assert!(positives > 0 && positives < scored.rows, "the threshold splits the rows: {positives} of {}", scored.rows);
    let card = std::fs::read_to_string(folder.join("card.md")).unwrap();
    assert!(card.contains("- **Decision:** a row is predicted `true` when its probability of `true` is at least **0.2**, the deployed threshold: the expected-cost threshold"), "{card}");
    assert!(card.contains("The outcome favourable to the person is `false`: rows below the threshold receive it."), "{card}");
}
