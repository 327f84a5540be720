"""Recomputes what `tabcard monitor` and `profile.json` state, with numpy and scipy.

Usage: monitor_check.py <results folder> <training table.parquet> <split column> <batch.parquet>...

- the stored numeric bin edges equal numpy.quantile(training values, [0.1, ..., 0.9],
  method="linear") with tied edges merged, and the stored training counts equal numpy's count
  of the training rows per bin (bins closed on the right: numpy.searchsorted(edges, v, "left"));
- each monitoring record's batch counts equal numpy's count of the batch file's values;
- each stability index equals sum(rel_entr(a, e) + rel_entr(e, a)) (= sum (a - e) ln(a / e),
  scipy.special.rel_entr) under the stated smoothing (bins empty on both sides dropped, 0.5 added
  to every remaining count on both sides), and each chi-square statistic, degrees of freedom and
  p-value equal scipy.stats.chi2_contingency(correction=False) of the kept 2 x B table, all
  within 1e-12.
"""

import json
import sys
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
from scipy.special import rel_entr
from scipy.stats import chi2_contingency

TOLERANCE = 1e-12
failures = []


def check(condition, what):
    if not condition:
        failures.append(what)


def values_of(table, name):
    column = table.column(name)
    return column.to_pylist()


def label(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def counts_of(bins, values):
    """Rows per bin, as profile.json orders them."""
    if bins["kind"] == "numeric":
        edges = np.asarray(bins["edges"], dtype=float)
        present = np.array([float(v) for v in values if v is not None], dtype=float)
        index = np.searchsorted(edges, present, side="left")
        counts = np.bincount(index, minlength=len(edges) + 1).tolist()
        return counts + [sum(v is None for v in values)]
    levels = bins["levels"]
    position = {level: i for i, level in enumerate(levels)}
    counts = [0] * (len(levels) + 2)
    for v in values:
        if v is None:
            counts[-1] += 1
        else:
            counts[position.get(label(v), len(levels))] += 1
    return counts


def stability(reference, batch):
    reference = np.asarray(reference, dtype=float)
    batch = np.asarray(batch, dtype=float)
    kept = (reference + batch) > 0
    r, b = reference[kept], batch[kept]
    e = (r + 0.5) / (r + 0.5).sum()
    a = (b + 0.5) / (b + 0.5).sum()
    psi = float(np.sum(rel_entr(a, e) + rel_entr(e, a)))
    if kept.sum() < 2 or r.sum() == 0 or b.sum() == 0:
        return psi, 0.0, int(max(kept.sum() - 1, 0)), 1.0
    statistic, p, dof, _ = chi2_contingency(np.vstack([r, b]), correction=False)
    return psi, float(statistic), int(dof), float(p)


def close(a, b):
    return abs(a - b) <= TOLERANCE * max(1.0, abs(b))


def main():
    folder, training_path, split_column = Path(sys.argv[1]), sys.argv[2], sys.argv[3]
    batches = sys.argv[4:]
    profile = json.loads((folder / "profile.json").read_text())
    training = pq.read_table(training_path)
    is_train = [v == "train" for v in values_of(training, split_column)]
    edges_checked = 0
    for feature in profile["features"]:
        name, bins = feature["name"], feature["bins"]
        values = [v for v, t in zip(values_of(training, name), is_train) if t]
        if bins["kind"] == "numeric":
            present = np.array([float(v) for v in values if v is not None], dtype=float)
            expected = np.quantile(present, [k / 10 for k in range(1, 10)], method="linear")
            merged = [expected[0]] + [x for prev, x in zip(expected, expected[1:]) if x != prev]
            check(len(merged) == len(bins["edges"]), f"{name}: {len(bins['edges'])} edges stored, numpy gives {len(merged)}")
            for stored, numpy_edge in zip(bins["edges"], merged):
                check(stored == numpy_edge, f"{name}: edge {stored!r} != numpy.quantile {numpy_edge!r}")
                edges_checked += 1
            check(bins["min"] == present.min() and bins["max"] == present.max(), f"{name}: training range")
        check(counts_of(bins, values) == feature["counts"], f"{name}: training counts {feature['counts']} != {counts_of(bins, values)}")
    print(f"profile.json: {edges_checked} numeric edges equal numpy.quantile(method='linear'); training counts of {len(profile['features'])} features equal numpy's")

    records = sorted((folder / "monitoring").glob("batch-*/report.json"))
    by_hash = {json.loads(r.read_text())["batch_sha256"]: json.loads(r.read_text()) for r in records}
    import hashlib

    compared = 0
    for batch_path in batches:
        digest = hashlib.sha256(Path(batch_path).read_bytes()).hexdigest()
        report = by_hash.get(digest)
        check(report is not None, f"{batch_path}: no monitoring record with its SHA-256")
        if report is None:
            continue
        batch = pq.read_table(batch_path)
        for feature, stored in zip(profile["features"], report["features"]):
            counts = counts_of(feature["bins"], values_of(batch, feature["name"]))
            check(counts == stored["batch"], f"{batch_path}: {feature['name']}: batch counts {stored['batch']} != {counts}")
        for check_row in [report["score"]] + report["features"]:
            psi, statistic, dof, p = stability(check_row["reference"], check_row["batch"])
            s = check_row["stability"]
            name = f"{batch_path}: {check_row['column']}"
            check(close(s["psi"], psi), f"{name}: PSI {s['psi']!r} != {psi!r}")
            check(close(s["chi_square"], statistic), f"{name}: chi-square {s['chi_square']!r} != {statistic!r}")
            check(s["degrees_of_freedom"] == dof, f"{name}: {s['degrees_of_freedom']} degrees of freedom != {dof}")
            check(abs(s["p_value"] - p) <= TOLERANCE, f"{name}: p-value {s['p_value']!r} != {p!r}")
            compared += 1
    print(f"monitoring records: {compared} stability indices, chi-square statistics and p-values of {len(batches)} batches equal scipy within {TOLERANCE}")
    if failures:
        print("\n".join(failures[:40]))
        sys.exit(1)


if __name__ == "__main__":
    main()
