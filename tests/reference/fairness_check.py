"""Recomputes a results folder's disparity analysis (fairness.json) with scikit-learn and numpy
from its stored test predictions and the data file: per group, the confusion matrix at the
deployed threshold (sklearn.metrics.confusion_matrix), the selection rate of the favourable
outcome, the adverse impact ratio against the most favoured judged group, true- and
false-positive rates and their gaps, and the top-label ECE in 10 right-closed equal-width bins
(Guo et al. 2017), all within 1e-12 of the stored point estimates.
Usage: fairness_check.py RESULTS_FOLDER DATA.parquet TARGET_COLUMN
"""
import json
import pathlib
import sys

import numpy as np
import pyarrow.parquet as pq
from sklearn.metrics import confusion_matrix

folder, data, target = pathlib.Path(sys.argv[1]), pathlib.Path(sys.argv[2]), sys.argv[3]
fairness = json.loads((folder / "fairness.json").read_text())
experiment = json.loads((folder / "experiment.json").read_text())
table = pq.read_table(data).to_pandas()
stored = np.loadtxt(folder / "test-predictions.csv", delimiter=",", skiprows=1)
rows, p = stored[:, 0].astype(int), stored[:, 2]
positive = experiment["class_labels"][1]
y = (table[target].astype(str).str.lower().to_numpy()[rows] == positive.lower()).astype(int)
threshold = fairness["threshold"]
decided = (p >= threshold).astype(int)
favourable = decided if fairness["favourable_is_positive"] else 1 - decided


def ece(y, p):
    proba = np.column_stack([1 - p, p])
    conf, pred = proba.max(axis=1), proba.argmax(axis=1)
    idx = np.searchsorted(np.linspace(0.0, 1.0, 11)[1:-1], conf, side="left")
    return sum((idx == b).mean() * abs((pred[idx == b] == y[idx == b]).mean() - conf[idx == b].mean()) for b in range(10) if (idx == b).any())


checked = 0
for column in fairness["columns"]:
    labels = table[column["column"]].astype(str).to_numpy()[rows]
    figures = {}
    for g in column["groups"]:
        m = labels == g["level"]
        cm = confusion_matrix(y[m], decided[m], labels=[0, 1])
        assert cm.tolist() == g["confusion"], (g["level"], cm.tolist(), g["confusion"])
        (tn, fp), (fn, tp) = cm
        figures[g["level"]] = {
            "selection_rate": favourable[m].mean(),
            "true_positive_rate": tp / (tp + fn),
            "false_positive_rate": fp / (fp + tn),
            "ece": ece(y[m], p[m]),
        }
    ref = figures[column["reference"]]
    for g in column["groups"]:
        mine = figures[g["level"]]
        mine["adverse_impact_ratio"] = mine["selection_rate"] / ref["selection_rate"]
        mine["true_positive_rate_gap"] = mine["true_positive_rate"] - ref["true_positive_rate"]
        mine["false_positive_rate_gap"] = mine["false_positive_rate"] - ref["false_positive_rate"]
        for name, value in mine.items():
            got = g["figures"][name]["value"]
            assert abs(got - value) <= 1e-12, (column["column"], g["level"], name, got, value)
            checked += 1
print(f"fairness.json reproduced by scikit-learn and numpy: {checked} per-group figures within 1e-12, {len(fairness['columns'])} group column(s)")
