"""Reference values for tabcard's metrics, computed with scikit-learn and numpy.

Run:  python tests/reference/metrics_reference.py > tests/reference/metrics_reference.json
(.ci/run re-runs it when Python is available and checks the committed file is unchanged.)
The inputs are generated here with a fixed numpy seed and written into the JSON beside the
expected values, so the Rust test (tests/metrics_reference.rs) reads both from one file.
"""
import json
import sys

import numpy as np
import sklearn
from sklearn import metrics
from sklearn.calibration import calibration_curve


def ece_top_label(y, proba, bins=10):
    # Guo et al. 2017, eq. 3: equal-width bins on top-label confidence, weighted by count, with
    # bins I_m = ((m-1)/M, m/M] closed on the right (an edge value falls in the bin below it), the
    # binning calibration_curve's "uniform" strategy uses.
    conf = proba.max(axis=1)
    pred = proba.argmax(axis=1)
    edges = np.linspace(0.0, 1.0, bins + 1)
    idx = np.searchsorted(edges[1:-1], conf, side="left")
    total = 0.0
    for b in range(bins):
        m = idx == b
        if m.any():
            total += m.mean() * abs((pred[m] == y[m]).mean() - conf[m].mean())
    return float(total)


def binary_case(name, y, p):
    proba = np.column_stack([1 - p, p])
    pred = (p > 0.5).astype(int)
    prec, rec, f1, sup = metrics.precision_recall_fscore_support(y, pred, labels=[0, 1], zero_division=0)
    frac_pos, mean_pred = calibration_curve(y, p, n_bins=10, strategy="uniform")
    return {
        "name": name,
        "labels": y.tolist(),
        "p_positive": p.tolist(),
        "expected": {
            "accuracy": metrics.accuracy_score(y, pred),
            "balanced_accuracy": metrics.balanced_accuracy_score(y, pred),
            "log_loss": metrics.log_loss(y, proba, labels=[0, 1]),
            "roc_auc": metrics.roc_auc_score(y, p),
            "average_precision": metrics.average_precision_score(y, p),
            "brier": metrics.brier_score_loss(y, p),
            "ece": ece_top_label(y, proba),
            "precision": prec.tolist(),
            "recall": rec.tolist(),
            "f1": f1.tolist(),
            "support": sup.tolist(),
            "confusion": metrics.confusion_matrix(y, pred, labels=[0, 1]).tolist(),
            "reliability_observed": frac_pos.tolist(),
            "reliability_mean_predicted": mean_pred.tolist(),
        },
    }


def main():
    rng = np.random.default_rng(20261202)
    cases = []

    # Fawcett (2006), "An introduction to ROC analysis", Fig. 3: 20 scored instances
    # (scores and classes from memory of the figure; the AUC itself comes from scikit-learn).
    scores = np.array([.9, .8, .7, .6, .55, .54, .53, .52, .51, .505, .4, .39, .38, .37, .36, .35, .34, .33, .30, .1])
    classes = "p p n p p p n n p n p n p n n n p n p n".split()
    cases.append(binary_case("fawcett_2006_fig3", np.array([c == "p" for c in classes], dtype=int), scores))

    n = 400
    y = (rng.random(n) < 0.3).astype(int)
    p = np.clip(0.3 + 0.35 * (y - 0.3) + 0.2 * rng.standard_normal(n), 0.001, 0.999)
    cases.append(binary_case("random_binary_400", y, p))

    # Ties: scores rounded to one decimal.
    cases.append(binary_case("tied_scores_400", y, np.round(p, 1)))

    # Multiclass: 3 classes, softmax of noisy scores.
    n = 300
    ym = rng.integers(0, 3, n)
    logits = rng.standard_normal((n, 3)) + 1.5 * np.eye(3)[ym]
    proba = np.exp(logits) / np.exp(logits).sum(axis=1, keepdims=True)
    pred = proba.argmax(axis=1)
    prec, rec, f1, sup = metrics.precision_recall_fscore_support(ym, pred, labels=[0, 1, 2], zero_division=0)
    multiclass = {
        "name": "random_multiclass_300",
        "labels": ym.tolist(),
        "proba": proba.ravel().tolist(),
        "classes": 3,
        "expected": {
            "accuracy": metrics.accuracy_score(ym, pred),
            "balanced_accuracy": metrics.balanced_accuracy_score(ym, pred),
            "log_loss": metrics.log_loss(ym, proba, labels=[0, 1, 2]),
            "roc_auc": metrics.roc_auc_score(ym, proba, multi_class="ovr", average="macro"),
            "brier": float(np.mean(np.sum((proba - np.eye(3)[ym]) ** 2, axis=1))),
            "ece": ece_top_label(ym, proba),
            "precision": prec.tolist(),
            "recall": rec.tolist(),
            "f1": f1.tolist(),
            "confusion": metrics.confusion_matrix(ym, pred, labels=[0, 1, 2]).tolist(),
        },
    }

    n = 250
    truth = rng.standard_normal(n) * 3 + 10
    predicted = truth + rng.standard_normal(n)
    regression = {
        "name": "random_regression_250",
        "truth": truth.tolist(),
        "predicted": predicted.tolist(),
        "expected": {
            "rmse": metrics.root_mean_squared_error(truth, predicted),
            "mae": metrics.mean_absolute_error(truth, predicted),
            "r2": metrics.r2_score(truth, predicted),
        },
    }

    out = {
        "generated_by": "tests/reference/metrics_reference.py",
        "scikit_learn": sklearn.__version__,
        "numpy": np.__version__,
        "binary": cases,
        "multiclass": multiclass,
        "regression": regression,
    }
    json.dump(out, sys.stdout, indent=1, sort_keys=True)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
