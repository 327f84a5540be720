"""Reference values for tabcard's calibration maps and conformal intervals, computed with scipy,
scikit-learn and numpy on inputs generated here with a fixed numpy seed (written beside the
expected values, so tests/calibration_reference.rs reads both from one file).

Run:  python tests/reference/calibration_reference.py > tests/reference/calibration_reference.json
(.ci/run re-runs it when Python is available and compares it with the committed file.)

- Temperature scaling (Guo et al. 2017): scipy.optimize.minimize_scalar, bounded to [0.01, 100],
  on the float64 mean log loss of softmax(z / T).
- Platt scaling (Platt 1999) with his smoothed targets: scipy.optimize.minimize (trust-exact,
  exact gradient and Hessian) on the same objective.
- Isotonic regression (Zadrozny & Elkan 2002): sklearn.isotonic.IsotonicRegression with
  out_of_bounds="clip", on scores with ties, predicted on the fit scores and a query grid.
- Split conformal half-width (Lei et al. 2018): np.sort(r)[k - 1] with k = ceil((n + 1)(1 - a))
  in exact rational arithmetic.
"""
import json
import math
import sys
from fractions import Fraction

import numpy as np
import scipy
import sklearn
from scipy import optimize
from scipy.special import logsumexp
from sklearn.isotonic import IsotonicRegression


def mean_log_loss(logits, y, temperature):
    z = logits / temperature
    return float(np.mean(logsumexp(z, axis=1) - z[np.arange(len(y)), y]))


def temperature_case(name, logits, y):
    res = optimize.minimize_scalar(
        lambda t: mean_log_loss(logits, y, t), bounds=(0.01, 100.0), method="bounded", options={"xatol": 1e-12}
    )
    return {"name": name, "classes": logits.shape[1], "logits": logits.ravel().tolist(), "labels": y.tolist(),
            "expected_temperature": float(res.x)}


def platt_case(name, z, y):
    n_pos = int(y.sum())
    n_neg = len(y) - n_pos
    t = np.where(y == 1, (n_pos + 1) / (n_pos + 2), 1 / (n_neg + 2))

    def f(w):
        s = w[0] * z + w[1]
        return float(np.sum(t * np.logaddexp(0, -s) + (1 - t) * np.logaddexp(0, s)))

    def grad(w):
        p = 1 / (1 + np.exp(-(w[0] * z + w[1])))
        return np.array([np.sum((p - t) * z), np.sum(p - t)])

    def hess(w):
        p = 1 / (1 + np.exp(-(w[0] * z + w[1])))
        q = p * (1 - p)
        return np.array([[np.sum(q * z * z), np.sum(q * z)], [np.sum(q * z), np.sum(q)]])

    res = optimize.minimize(f, np.array([0.0, math.log((n_pos + 1) / (n_neg + 1))]), jac=grad, hess=hess,
                            method="trust-exact", options={"gtol": 1e-11})
    return {"name": name, "logits": z.tolist(), "labels": y.tolist(), "expected_a": float(res.x[0]),
            "expected_b": float(res.x[1])}


def isotonic_case(name, z, y):
    iso = IsotonicRegression(out_of_bounds="clip").fit(z, y)
    query = np.concatenate([z, np.linspace(z.min() - 1, z.max() + 1, 57), np.unique(z)])
    return {"name": name, "logits": z.tolist(), "labels": y.tolist(), "query": query.tolist(),
            "expected": iso.predict(query).tolist()}


def conformal_case(name, r, a):
    n = len(r)
    k = math.ceil((n + 1) * (1 - Fraction(str(a))))
    return {"name": name, "residuals": r.tolist(), "alpha": a, "k": k,
            "expected_half_width": float(np.sort(r)[k - 1]) if k <= n else None}


def main():
    rng = np.random.default_rng(20261203)
    temperature, platt, isotonic, conformal = [], [], [], []

    # Binary, overconfident: the logit is 2.5 times the true log odds, plus noise.
    n = 500
    true = rng.standard_normal(n) * 1.5
    y = (rng.random(n) < 1 / (1 + np.exp(-true))).astype(int)
    z = 2.5 * true + 0.3 * rng.standard_normal(n)
    temperature.append(temperature_case("binary_overconfident_500", np.column_stack([np.zeros(n), z]), y))
    platt.append(platt_case("binary_overconfident_500", z, y))
    # Ties: logits rounded to one decimal.
    isotonic.append(isotonic_case("binary_tied_500", np.round(z, 1), y))
    isotonic.append(isotonic_case("binary_distinct_500", z, y))

    # Binary, underconfident and shifted.
    n = 300
    true = rng.standard_normal(n) * 2.0
    y2 = (rng.random(n) < 1 / (1 + np.exp(-true))).astype(int)
    z2 = 0.4 * true - 0.7 + 0.2 * rng.standard_normal(n)
    temperature.append(temperature_case("binary_underconfident_300", np.column_stack([np.zeros(n), z2]), y2))
    platt.append(platt_case("binary_underconfident_shifted_300", z2, y2))
    isotonic.append(isotonic_case("binary_underconfident_tied_300", np.round(z2, 2), y2))

    # Multiclass: 4 classes, logits three times too large.
    n = 400
    ym = rng.integers(0, 4, n)
    scores = rng.standard_normal((n, 4)) + 1.2 * np.eye(4)[ym]
    temperature.append(temperature_case("multiclass_4_overconfident_400", 3.0 * scores, ym))

    for n, a in [(99, 0.1), (100, 0.1), (181, 0.1), (250, 0.05), (8, 0.1), (9, 0.1), (1000, 0.2)]:
        conformal.append(conformal_case(f"abs_residuals_{n}_alpha_{a}", np.abs(rng.standard_normal(n) * 2.0), a))
    # Ties among residuals.
    conformal.append(conformal_case("tied_residuals_120_alpha_0.1", np.round(np.abs(rng.standard_normal(120)), 1), 0.1))

    out = {
        "generated_by": "tests/reference/calibration_reference.py",
        "scipy": scipy.__version__,
        "scikit_learn": sklearn.__version__,
        "numpy": np.__version__,
        "temperature": temperature,
        "platt": platt,
        "isotonic": isotonic,
        "conformal": conformal,
    }
    json.dump(out, sys.stdout, indent=1, sort_keys=True)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
