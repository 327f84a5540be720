"""Reads a `tabcard predict` output with pyarrow (an independent Parquet reader) and checks it
against the scoring-output schema, version 3, as README.md documents it: column names in order,
Arrow types, the key-value metadata, decisions at the deployed threshold, calibrated probabilities
equal to the stored test predictions (lease demo), and interval bounds at the prediction -+ the
stored half-width (greenhouse demo). Usage: scoring_schema_check.py scored.parquet RESULTS_FOLDER
"""
import hashlib
import json
import pathlib
import sys

import pyarrow.parquet as pq

EXPECTED_REGRESSION = [
    ("bed_id", "string"),
    ("row", "int64"),
    ("prediction", "double"),
    ("interval_lower", "double"),
    ("interval_upper", "double"),
    ("outside_training_range", "bool"),
    ("outside_range_columns", "string"),
    ("imputed_columns", "string"),
    ("unseen_level_columns", "string"),
]

EXPECTED = [
    ("application_id", "int64"),
    ("row", "int64"),
    ("p_true", "double"),
    ("decision", "string"),
    ("decision_threshold", "double"),
    ("decision_favourable", "bool"),
    ("outside_training_range", "bool"),
    ("outside_range_columns", "string"),
    ("imputed_columns", "string"),
    ("unseen_level_columns", "string"),
]

scored, folder = pathlib.Path(sys.argv[1]), pathlib.Path(sys.argv[2])
table = pq.read_table(scored)
got = [(f.name, str(f.type)) for f in table.schema]
regression = "prediction" in table.schema.names
expected = EXPECTED_REGRESSION if regression else EXPECTED
assert got == expected, f"schema {got} != {expected}"
file_meta = pq.ParquetFile(scored).metadata.metadata or {}
meta = {k.decode(): v.decode() for k, v in file_meta.items() if k.startswith(b"tabcard.")}
selection = json.loads((folder / "selection.json").read_text())
digest = hashlib.sha256((folder / "integrity.sha256").read_bytes()).hexdigest()
assert meta["tabcard.scoring_schema"] == "3", meta
assert meta["tabcard.model_id"] == selection["selected_run"], meta
assert meta["tabcard.results_digest"] == digest, meta
rows = table.to_pylist()
assert all(isinstance(json.loads(r["imputed_columns"]), list) for r in rows)
stored = [line.split(",") for line in (folder / "test-predictions.csv").read_text().splitlines()[1:]]
if regression:
    half = selection["interval"]["half_width"]
    assert all(r["interval_lower"] == r["prediction"] - half and r["interval_upper"] == r["prediction"] + half for r in rows)
    assert all(rows[int(s[0])]["prediction"] == float(s[1]) for s in stored)
    what = f"intervals at prediction -+ {half}"
else:
    threshold = selection["test"]["chosen_threshold"]["threshold"]
    assert all(r["decision_threshold"] == threshold for r in rows)
    assert all(r["decision"] == ("true" if r["p_true"] >= threshold else "false") for r in rows)
    # The stored test predictions are the deployed (calibrated) probabilities: predict gives them.
    assert all(rows[int(s[0])]["p_true"] == float(s[2]) for s in stored)
    what = f"decisions at {threshold}, {selection.get('calibration', {}).get('map', {}).get('method', 'no')} calibration"
print(f"scoring schema v3 read by pyarrow: {len(got)} columns, {len(rows)} rows, metadata as documented, {what}, test rows equal to test-predictions.csv")
