"""Compares a fresh run of metrics_reference.py with the committed metrics_reference.json.

Floats must agree within 1e-12 relative (1e-15 absolute near zero; an optional third argument
sets the relative tolerance, 1e-9 for the optimiser results of calibration_reference.json, whose
iterations can take another path when a function value moves by an ulp), everything else exactly:
numpy's vectorised exp and log round differently by an ulp on CPUs with different vector units
(for example AVX2 against AVX-512), which moves the last digit of the generated probabilities
and of metrics computed from them, but nothing a test depends on.

Usage: python compare_reference.py COMMITTED.json FRESH.json [RELATIVE_TOLERANCE]
"""
import json
import math
import sys


def compare(a, b, path, problems, counts, rel=1e-12):
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            problems.append(f"{path}: keys differ: {sorted(set(a) ^ set(b))}")
            return
        for k in a:
            compare(a[k], b[k], f"{path}/{k}", problems, counts, rel)
    elif isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            problems.append(f"{path}: {len(a)} values vs {len(b)}")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            compare(x, y, f"{path}[{i}]", problems, counts, rel)
    elif isinstance(a, float) or isinstance(b, float):
        counts[0] += 1
        if not (isinstance(a, (int, float)) and isinstance(b, (int, float))) or not math.isclose(a, b, rel_tol=rel, abs_tol=1e-15):
            problems.append(f"{path}: {a!r} vs {b!r}")
        elif a != b:
            counts[1] += 1
    elif a != b:
        problems.append(f"{path}: {a!r} vs {b!r}")


def main():
    committed = json.load(open(sys.argv[1]))
    fresh = json.load(open(sys.argv[2]))
    rel = float(sys.argv[3]) if len(sys.argv) > 3 else 1e-12
    problems, counts = [], [0, 0]
    compare(committed, fresh, "", problems, counts, rel)
    if problems:
        print(f"{sys.argv[1]} differs from a fresh run ({len(problems)} values):")
        for p in problems[:20]:
            print("  " + p)
        return 1
    print(f"{committed.get('generated_by', sys.argv[1])}: reference values reproduced: {counts[0]} floats within {rel:g} ({counts[1]} differ in the last digits), 1 passed, 0 failed")
    return 0


if __name__ == "__main__":
    sys.exit(main())
