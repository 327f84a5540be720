"""Exports two classic open tables that scikit-learn ships inside its wheel to Parquet.

Sources (files inside the scikit-learn 1.9.1 wheel from PyPI, sklearn/datasets/data/):
- iris.csv: Fisher (1936) iris measurements, UCI Machine Learning Repository "Iris";
  150 rows, 3 classes of 50 (setosa, versicolor, virginica).
- breast_cancer.csv: Breast Cancer Wisconsin (Diagnostic), Wolberg, Street and Mangasarian (1995),
  UCI Machine Learning Repository; 569 rows, 212 malignant and 357 benign, 30 features.
Run: python tests/data/open/export_from_scikit_learn.py  (needs scikit-learn and pyarrow)
"""
import pathlib

import pyarrow as pa
import pyarrow.parquet as pq
from sklearn.datasets import load_breast_cancer, load_iris

here = pathlib.Path(__file__).parent

iris = load_iris(as_frame=True)
frame = iris.frame.rename(columns=lambda c: c.replace(" (cm)", "_cm").replace(" ", "_"))
frame["species"] = [iris.target_names[t] for t in iris.target]
frame = frame.drop(columns=["target"])
pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), here / "iris.parquet")

cancer = load_breast_cancer(as_frame=True)
frame = cancer.frame.rename(columns=lambda c: c.replace(" ", "_"))
frame["diagnosis"] = [cancer.target_names[t] for t in cancer.target]
frame = frame.drop(columns=["target"])
pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), here / "breast_cancer.parquet")
