"""Checks a results folder's sensitivity.json and `predict --reasons` output against references
outside tabcard, on a float64 numpy re-implementation of the stored model (weights read from
weights.safetensors, the preprocessor from preprocessor.json, the calibration map from
selection.json):

- the numpy model reproduces the stored test predictions (test-predictions.csv) within 1e-5;
- partial dependence and ICE curves equal scikit-learn's
  sklearn.inspection.partial_dependence (scikit-learn 1.9.1 from PyPI; method="brute",
  kind="both", tabcard's grid passed as custom_values, categorical_features set, the same test
  rows) within 1e-6;
- integrated gradients (Sundararajan, Taly & Yan, ICML 2017) from the stored median reference:
  a float64 numpy midpoint quadrature of the path integral with 10,000 steps, gradients by
  hand-written backpropagation, equals every contribution `predict --reasons` wrote for the
  first 200 rows within the row's stated tolerance (0.01, or 0.1% of the row's move) for a smooth
  network (GELU, tanh, sigmoid); for a ReLU network at most 1% of them may lie beyond it (see the
  comment at the assertion).

- with a fourth argument, predictions with reasons scored by the folder's linear baseline run (no
  hidden layer): every contribution equals w . (x - x') over the feature's inputs exactly, up to
  float32 rounding (1e-5 relative), for the first 200 rows.

usage: explain_check.py <results folder> <table.parquet> <predictions with reasons.parquet>
                        [<predictions with reasons by the linear baseline run.parquet>]
"""

import json
import pathlib
import struct
import sys

import numpy as np
import pyarrow.parquet as pq
from scipy.special import erf
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.inspection import partial_dependence

folder, table_path, scored_path = pathlib.Path(sys.argv[1]), sys.argv[2], sys.argv[3]
BN_EPS = 1e-5  # pipeline/nn/layers.rs


def load_json(name):
    return json.loads((folder / name).read_text())


def safetensors(path):
    raw = path.read_bytes()
    n = struct.unpack("<Q", raw[:8])[0]
    header = json.loads(raw[8 : 8 + n])
    body = raw[8 + n :]
    out = {}
    for name, meta in header.items():
        if name == "__metadata__":
            continue
        assert meta["dtype"] == "F32", meta
        a, b = meta["data_offsets"]
        out[name] = np.frombuffer(body[a:b], dtype="<f4").astype(np.float64).reshape(meta["shape"])
    return out


selection = load_json("selection.json")
if selection.get("ensemble"):
    sys.exit("explain_check: seed ensembles are not handled by this check")
run = folder / "runs" / selection["selected_run"]
settings = json.loads((run / "settings.json").read_text())["model"]
weights = safetensors(run / "weights.safetensors")
record = json.loads((run / "result.json").read_text())
preprocessor = load_json("preprocessor.json")
inputs = preprocessor["inputs"]
calibration = (selection.get("calibration") or {}).get("map")
sensitivity = load_json("sensitivity.json")
task = record["head"]["task"]
scaling = record.get("target_scaling")


def encode(X):
    """The preprocessor of pipeline/data/prep.rs in float64: X is an object array, one column per
    raw feature in the preprocessor's order."""
    cols = []
    for j, enc in enumerate(inputs):
        column = X[:, j]
        if enc["encoding"] == "numeric":
            missing = np.array([v is None or (isinstance(v, float) and np.isnan(v)) for v in column])
            values = np.array([enc["impute"] if m else float(v) for v, m in zip(column, missing)])
            cols.append(((values - enc["mean"]) / enc["scale"])[:, None])
            if enc["indicator"]:
                cols.append(missing.astype(float)[:, None])
        else:
            levels = enc["levels"]
            onehot = np.zeros((len(column), len(levels) + 1 + int(enc["indicator"])))
            for i, v in enumerate(column):
                if v is None:
                    onehot[i, enc["impute"]] = 1.0
                    if enc["indicator"]:
                        onehot[i, len(levels) + 1] = 1.0
                else:
                    label = str(v)
                    onehot[i, levels.index(label) if label in levels else len(levels)] = 1.0
            cols.append(onehot)
    return np.hstack(cols)


def activation(z):
    kind = settings["activation"]
    if kind == "relu":
        return np.maximum(z, 0.0), (z > 0).astype(float)
    if kind == "sigmoid":
        a = 1.0 / (1.0 + np.exp(-z))
        return a, a * (1.0 - a)
    if kind == "tanh":
        a = np.tanh(z)
        return a, 1.0 - a * a
    if kind == "gelu":
        return 0.5 * z * (1.0 + erf(z / np.sqrt(2.0))), 0.5 * (1.0 + erf(z / np.sqrt(2.0))) + z * np.exp(-0.5 * z * z) / np.sqrt(2.0 * np.pi)
    return z, np.ones_like(z)


def raw_outputs(E, seed=None):
    """Evaluation-mode raw outputs of encoded rows E; with `seed` (one weight per output), also the
    gradient of the seeded outputs with respect to E."""
    h, tape = E, []
    width = E.shape[1]
    for i, w in enumerate(settings["hidden"]):
        name = f"layer{i:02}"
        z = h @ weights[f"{name}.weight"] + weights[f"{name}.bias"].reshape(-1)
        slope = np.ones(w)
        if settings["batch_norm"]:
            std = np.sqrt(weights[f"{name}.bn.running_var"].reshape(-1) + BN_EPS)
            slope = weights[f"{name}.bn.gamma"].reshape(-1) / std
            z = (z - weights[f"{name}.bn.running_mean"].reshape(-1)) * slope + weights[f"{name}.bn.beta"].reshape(-1)
        a, da = activation(z)
        residual = settings["residual"] and i > 0 and w == width
        if residual:
            a = a + h
        tape.append((name, da, slope, residual))
        h, width = a, w
    out = h @ weights["output.weight"] + weights["output.bias"].reshape(-1)
    if seed is None:
        return out
    g = np.tile(np.asarray(seed, dtype=float), (E.shape[0], 1)) @ weights["output.weight"].T
    for name, da, slope, residual in reversed(tape):
        gz = g * da * slope
        g_in = gz @ weights[f"{name}.weight"].T
        if residual:
            g_in = g_in + g
        g = g_in
    return out, g


def deployed_scores(E):
    """The deployed score: calibrated positive-class probability (binary), class probabilities
    (multiclass) or the prediction in target units (regression)."""
    z = raw_outputs(E)
    if task == "regression":
        return scaling["mean"] + scaling["std"] * z[:, 0]
    if task == "binary":
        z = z[:, 0]
        if calibration is None:
            return 1.0 / (1.0 + np.exp(-z))
        if calibration["method"] == "temperature":
            return 1.0 / (1.0 + np.exp(-z / calibration["temperature"]))
        sys.exit(f"explain_check: calibration {calibration['method']} is not handled")
    if calibration is not None:
        z = z / calibration["temperature"]
    e = np.exp(z - z.max(axis=1, keepdims=True))
    return e / e.sum(axis=1, keepdims=True)


class StoredModel(BaseEstimator):
    """The stored model as a scikit-learn estimator over raw feature columns."""

    def fit(self, X, y=None):
        return self


class StoredClassifier(ClassifierMixin, StoredModel):
    def __init__(self):
        self.classes_ = np.array([0, 1])

    def predict_proba(self, X):
        p = deployed_scores(encode(X))
        return np.column_stack([1.0 - p, p]) if p.ndim == 1 else p

    def predict(self, X):
        return self.predict_proba(X).argmax(axis=1)


class StoredRegressor(RegressorMixin, StoredModel):
    def __init__(self):
        self.fitted_ = True

    def predict(self, X):
        return deployed_scores(encode(X))


table = pq.read_table(table_path)
names = [enc["name"] for enc in inputs]
data = {n: table.column(n).to_pylist() for n in names}
test_rows = [int(line.split(",")[0]) for line in (folder / "test-predictions.csv").read_text().splitlines()[1:]]
X = np.empty((len(test_rows), len(names)), dtype=object)
for j, n in enumerate(names):
    col = data[n]
    X[:, j] = [col[r] for r in test_rows]

# 1. The numpy model is the stored one.
stored = np.array([[float(x) for x in line.split(",")[1:]] for line in (folder / "test-predictions.csv").read_text().splitlines()[1:]])
mine = deployed_scores(encode(X))
expected = stored[:, 1] if task == "binary" else (stored[:, 0] if task == "regression" else stored)
scale = 1.0 if task != "regression" else scaling["std"]
worst = np.max(np.abs(mine - expected)) / scale
assert worst < 1e-5, f"numpy model differs from test-predictions.csv by {worst}"

# 2. Partial dependence and ICE against scikit-learn.
estimator = StoredRegressor() if task == "regression" else StoredClassifier()
if task == "multiclass":
    sys.exit("explain_check: multiclass curves are not handled by this check")
checked = 0
for curve in sensitivity["curves"]:
    j = names.index(curve["feature"])
    categorical = inputs[j]["encoding"] == "categorical"
    grid = curve["levels"] if categorical else curve["grid"]
    result = partial_dependence(
        estimator,
        X,
        [j],
        categorical_features=[j] if categorical else None,
        custom_values={j: np.array(grid, dtype=object if categorical else float)},
        method="brute",
        kind="both",
    )
    got = np.array(curve["average"][0])
    assert list(map(str, result["grid_values"][0])) == list(map(str, grid)), (curve["feature"], result["grid_values"][0], grid)
    difference = np.max(np.abs(result["average"][0] - got)) / scale
    assert difference < 1e-6, f"{curve['feature']}: partial dependence differs from scikit-learn's by {difference}"
    for position, ice in zip(curve["ice_rows"], curve["ice"]):
        d = np.max(np.abs(result["individual"][0][position] - np.array(ice))) / scale
        assert d < 1e-6, f"{curve['feature']}: ICE of test row {position} differs by {d}"
    checked += 1

# 3. Integrated gradients against a 10,000-step float64 quadrature.
scored = pq.read_table(scored_path)
reference = np.array(sensitivity["references"]["median"], dtype=np.float32).astype(np.float64)
rows = 200
widths = [1 + int(e["indicator"]) if e["encoding"] == "numeric" else len(e["levels"]) + 1 + int(e["indicator"]) for e in inputs]
starts = np.cumsum([0] + widths[:-1])
all_rows = np.empty((rows, len(names)), dtype=object)
for j, n in enumerate(names):
    all_rows[:, j] = data[n][:rows]
E = encode(all_rows).astype(np.float32).astype(np.float64)  # the f32 inputs the engine sees
steps = 10_000
alphas = (np.arange(steps) + 0.5) / steps
seed = [scaling["std"]] if task == "regression" else [1.0]
worst_feature, worst_sum = 0.0, 0.0
beyond = []
features_compared = 0
for r in range(rows):
    path = reference + alphas[:, None] * (E[r] - reference)
    _, g = raw_outputs(path, seed)
    contributions = (E[r] - reference) * g.mean(axis=0)
    per_feature = np.array([contributions[s : s + w].sum() for s, w in zip(starts, widths)])
    move = seed[0] * (raw_outputs(E[r : r + 1])[0, 0] - raw_outputs(reference[None, :])[0, 0])
    worst_sum = max(worst_sum, abs(per_feature.sum() - move))
    tolerance = max(0.01 * (scaling["std"] if task == "regression" else 1.0), 0.001 * abs(move))
    listed = json.loads(scored.column("reason_features")[r].as_py())
    values = json.loads(scored.column("reason_contributions")[r].as_py())
    for f, v in zip(listed, values):
        d = abs(per_feature[names.index(f)] - v)
        if d > tolerance:
            beyond.append(f"row {r}, {f}: tabcard {v:.6f} vs quadrature {per_feature[names.index(f)]:.6f} (tolerance {tolerance})")
        worst_feature = max(worst_feature, d)
        features_compared += 1
# The 10,000-step midpoint rule itself: its gap is its own discretisation error (a ReLU network's
# gradient jumps, so it converges only as 1/steps there).
assert worst_sum < 1e-3 * max(1.0, scale), f"the quadrature's completeness gap {worst_sum}"
# A smooth network's contributions must all lie within the row's tolerance. A ReLU network's
# gradient along the path is a step function; tabcard's fixed-grid trapezoid rule with its
# error estimate (README: "What moves the output") may leave a feature beyond the tolerance, and
# at most 1% of the compared contributions may be.
allowed = 0 if settings["activation"] != "relu" else features_compared // 100
for line in beyond:
    print("beyond the tolerance:", line)
assert len(beyond) <= allowed, f"{len(beyond)} of {features_compared} contributions beyond the tolerance (allowed {allowed})"
print(
    f"explain check ({task}, {settings['activation']}): numpy model equals test-predictions.csv within {worst:.1e}; "
    f"{checked} partial dependence and ICE curves equal scikit-learn's within 1e-6; "
    f"{features_compared - len(beyond)} of {features_compared} contributions on {rows} rows equal a 10,000-step quadrature within the row tolerance "
    f"(largest difference {worst_feature:.2e}; the quadrature's own completeness gap {worst_sum:.1e})"
)

# 4. The linear baseline: integrated gradients are exactly w . (x - x').
if len(sys.argv) > 4:
    plan = load_json("plan.json")
    baseline = next(c["id"] for c in plan["configs"] if c.get("baseline"))
    run_id = next(r["id"] for r in plan["runs"] if r["config_id"] == baseline)
    linear = safetensors(folder / "runs" / run_id / "weights.safetensors")
    w = linear["output.weight"][:, 0] * (scaling["std"] if task == "regression" else 1.0)
    scored_linear = pq.read_table(sys.argv[4])
    assert pq.read_metadata(sys.argv[4]).metadata[b"tabcard.model_id"].decode() == run_id, "the fourth file was scored by the baseline run"
    compared, worst_linear = 0, 0.0
    for r in range(rows):
        exact = (E[r] - reference) * w
        per_feature = np.array([exact[s : s + w_].sum() for s, w_ in zip(starts, widths)])
        listed = json.loads(scored_linear.column("reason_features")[r].as_py())
        values = json.loads(scored_linear.column("reason_contributions")[r].as_py())
        for f, v in zip(listed, values):
            d = abs(per_feature[names.index(f)] - v)
            assert d <= 1e-5 * max(1.0, abs(v)), f"linear baseline, row {r}, {f}: tabcard {v} vs w.(x - x') {per_feature[names.index(f)]}"
            worst_linear = max(worst_linear, d)
            compared += 1
    print(f"explain check (linear baseline {run_id}): {compared} contributions on {rows} rows equal w.(x - x') within {worst_linear:.1e}")
