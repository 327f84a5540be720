#!/usr/bin/env bash
# What `tabcard monitor` costs on a large batch: a 64-input [64, 64] ReLU model trained on 20,000
# synthetic rows (`bench data`, float32 features), then a 1,000,000-row x 64 batch without the
# target (the drift pass: schema check, file SHA-256, one streamed read, binning of every feature,
# scoring in chunks, the record). Whole command, process start to exit, best of REPS, on the
# machine's cores; peak resident memory from /usr/bin/time, set against the batch's f32 matrix
# (rows x 64 x 4 bytes). Then the same with outcomes on 1,000,000 labelled rows (the bootstrap's
# 200 resamples of every card metric dominate). BENCHMARKS.md records the figures.
#
#   bash tests/bench/monitor.sh            REPS=5 bash tests/bench/monitor.sh
set -euo pipefail
cd "$(dirname "$0")/../.."
work="${BENCH_DIR:-target/bench}/monitor"
mkdir -p "$work"
cargo build --release --quiet --bin tabcard --example bench
bin="$PWD/target/release/tabcard"
gen="$PWD/target/release/examples/bench"
reps="${REPS:-3}"
rows=1000000
[[ -f $work/train.parquet ]] || "$gen" data 20000 64 "$work/train.parquet" >/dev/null
[[ -f $work/batch.parquet ]] || "$gen" data "$rows" 64 "$work/batch.parquet" --no-target >/dev/null
[[ -f $work/labelled-1m.parquet ]] || "$gen" data "$rows" 64 "$work/labelled-1m.parquet" >/dev/null
cat > "$work/bench.toml" <<'TOML'
[experiment]
name = "monitor-64"
[data]
path = "train.parquet"
target = "y"
task = "binary"
[model]
hidden = [64, 64]
[training]
epochs = 3
batch_size = 256
[selection]
baseline = false
bootstrap = 200
[sweep]
seeds = [1]
TOML
rm -rf "$work/results"
"$bin" train "$work/bench.toml" --results "$work/results" --quiet >/dev/null
folder="$(ls -d "$work"/results/*/ | head -1)"
measure() { # best "seconds peak_kib" of $reps runs of tabcard monitor on $1
  local best="" line
  for _ in $(seq "$reps"); do
    rm -rf "$folder/monitoring" "$work/results/monitoring.jsonl"
    # Exit 8 or 9 (watch, act) is a reading, not a failure.
    /usr/bin/time -o "$work/time.txt" -f "%e %M" "$bin" monitor "$folder" "$1" >/dev/null 2>&1 || { rc=$?; [[ $rc -eq 8 || $rc -eq 9 ]]; }
    line=$(tail -1 "$work/time.txt")
    best=$(python3 -c "a='$best'; b='$line'; print(b if a=='' or float(b.split()[0]) < float(a.split()[0]) else a)")
  done
  echo "$best"
}
drift=$(measure "$work/batch.parquet")
outcomes=$(measure "$work/labelled-1m.parquet")
python3 - "$drift" "$outcomes" "$rows" <<'PY'
import sys
(s, kib), (so, kibo), rows = sys.argv[1].split(), sys.argv[2].split(), int(sys.argv[3])
matrix = rows * 64 * 4
print(f"monitor, {rows:,} rows x 64 float32 features, [64, 64] ReLU, no target: {float(s):.2f} s (target 10 s), "
      f"peak RSS {int(kib) / 1024:.0f} MiB = {int(kib) * 1024 / matrix:.2f}x the batch's f32 matrix ({matrix / 2**20:.0f} MiB; target 1.5x)")
print(f"monitor with outcomes, {rows:,} labelled rows, 200 bootstrap resamples: {float(so):.2f} s, peak RSS {int(kibo) / 1024:.0f} MiB")
PY
