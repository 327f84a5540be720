"""Reads a `tabcard predict` output with pyarrow (an independent Parquet reader) and checks it
against the scoring-output schema, version 1, as README.md documents it: column names in order,
Arrow types, and the key-value metadata. Usage: scoring_schema_check.py scored.parquet RESULTS_FOLDER
"""
import hashlib
import json
import pathlib
import sys

import pyarrow.parquet as pq

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
assert got == EXPECTED, f"schema {got} != {EXPECTED}"
file_meta = pq.ParquetFile(scored).metadata.metadata or {}
meta = {k.decode(): v.decode() for k, v in file_meta.items() if k.startswith(b"tabcard.")}
selection = json.loads((folder / "selection.json").read_text())
digest = hashlib.sha256((folder / "integrity.sha256").read_bytes()).hexdigest()
assert meta["tabcard.scoring_schema"] == "1", meta
assert meta["tabcard.model_id"] == selection["selected_run"], meta
assert meta["tabcard.results_digest"] == digest, meta
threshold = selection["test"]["chosen_threshold"]["threshold"]
rows = table.to_pylist()
assert all(r["decision_threshold"] == threshold for r in rows)
assert all(r["decision"] == ("true" if r["p_true"] >= threshold else "false") for r in rows)
assert all(isinstance(json.loads(r["imputed_columns"]), list) for r in rows)
print(f"scoring schema v1 read by pyarrow: {len(got)} columns, {len(rows)} rows, metadata and decisions as documented")
