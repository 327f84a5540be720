#!/usr/bin/env bash
# What the analyses of the deployed model cost: (1) `tabcard predict --reasons 4` on the lease
# demo's 24,000 rows with a 23-input [64, 64] ReLU model at the default 32 intervals, on the machine's cores,
# against the same `predict` without reasons (whole commands, process start to exit, best of
# REPS); (2) the lease demo's "select and test" phase from timing.json, which holds every
# analysis after training (selection, test metrics, calibration, fairness, permutation
# importance, reference rows, the sensitivity table, integrated gradients of the test rows and
# the curves), on the machine's cores. Prints one line per figure; BENCHMARKS.md records them.
#
#   bash tests/bench/explain.sh            REPS=5 bash tests/bench/explain.sh
set -euo pipefail
cd "$(dirname "$0")/../.."
work="${BENCH_DIR:-target/bench}/explain"
rm -rf "$work" && mkdir -p "$work"
cargo build --release --quiet --bin tabcard
bin="$PWD/target/release/tabcard"
reps="${REPS:-3}"
best() { # best wall seconds of $reps runs of "$@"
  local best=""
  for _ in $(seq "$reps"); do
    local start end
    start=$(date +%s.%N); "$@" >/dev/null 2>&1 || { echo "failed: $*" >&2; exit 1; }; end=$(date +%s.%N)
    best=$(python3 -c "a='$best'; t=$end-$start; print(t if a=='' else min(float(a), t))")
  done
  printf '%.3f' "$best"
}
cp data-demo/lease-applications.parquet "$work/"
cat > "$work/wide.toml" <<'TOML'
[experiment]
name = "lease-64x64"
[data]
path = "lease-applications.parquet"
target = "defaulted_12m"
task = "binary"
ids = ["application_id"]
[model]
hidden = [64, 64]
[training]
epochs = 10
batch_size = 128
[selection]
baseline = false
[decision]
favourable = "false"
[sweep]
seeds = [1]
TOML
"$bin" train "$work/wide.toml" --results "$work/results" --quiet >/dev/null
folder="$(ls -d "$work"/results/*/ | head -1)"
rows=$(python3 -c "print(24000)")
plain=$(best "$bin" predict "$folder" "$work/lease-applications.parquet" --out "$work/plain.parquet" --force)
reasons=$(best "$bin" predict "$folder" "$work/lease-applications.parquet" --out "$work/reasons.parquet" --force --reasons 4)
python3 - "$plain" "$reasons" "$rows" <<'PY'
import sys
plain, reasons, rows = float(sys.argv[1]), float(sys.argv[2]), int(sys.argv[3])
print(f"predict, 23-input [64, 64] ReLU, {rows} rows, every core: {plain:.3f} s without reasons, {reasons:.3f} s with --reasons 4 "
      f"({rows / reasons:,.0f} rows/s whole command; the reasons alone {rows / max(reasons - plain, 1e-9):,.0f} rows/s)")
PY
"$bin" train experiments/lease-default.toml --results "$work/demo" --quiet >/dev/null
python3 - "$(ls -d "$work"/demo/*/ | head -1)timing.json" <<'PY'
import json, sys
t = json.load(open(sys.argv[1]))
phases = {p["name"]: p["seconds"] for p in t["phases"]}
print(f"lease demo, every analysis after training (the 'select and test' phase, {t['jobs']} workers): {phases['select and test']:.2f} s of {t['wall_seconds']:.2f} s")
PY
