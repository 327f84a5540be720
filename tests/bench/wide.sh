#!/usr/bin/env bash
# Wide tables cost linear time in their columns: `tabcard check` and a small `tabcard train` on a
# 60-row table of 10,000 float features (and, for the slope, 2,500 and 5,000), each timed as the
# whole command (process start to exit, file hash and first pass included) with bash's clock,
# best of REPS. Prints one line per case; BENCHMARKS.md records the latest.
#
#   bash tests/bench/wide.sh            REPS=5 bash tests/bench/wide.sh
set -euo pipefail
cd "$(dirname "$0")/../.."
work="${BENCH_DIR:-target/bench}/wide"
mkdir -p "$work"
cargo build --release --quiet --bin tabcard --example bench
bin="$PWD/target/release/tabcard"
reps="${REPS:-3}"
best() { # best wall seconds of $reps runs of "$@"
  local best=""
  for _ in $(seq "$reps"); do
    local start end
    start=$(date +%s.%N); "$@" >/dev/null 2>&1 || { echo "failed: $*" >&2; exit 1; }; end=$(date +%s.%N)
    best=$(python3 -c "a='$best'; t=$end-$start; print(t if a=='' else min(float(a), t))")
  done
  printf '%.2f' "$best"
}
for cols in 2500 5000 10000; do
  data="$work/wide-$cols.parquet"
  [[ -f $data ]] || target/release/examples/bench data 60 "$cols" "$data" >/dev/null
  cat > "$work/wide-$cols.toml" <<TOML
[experiment]
name = "wide-$cols"

[data]
path = "wide-$cols.parquet"
target = "y"
task = "binary"

[split]
validation = 0.25
test = 0.25

[model]
hidden = [8]

[training]
epochs = 2
batch_size = 16

[selection]
baseline = false
bootstrap = 50

[sweep]
seeds = [1]
TOML
  check=$(best "$bin" check "$work/wide-$cols.toml")
  train=$(cd "$work" && best bash -c "rm -rf results-$cols && '$bin' train wide-$cols.toml --results results-$cols --quiet")
  echo "60 rows x $cols columns: check ${check} s, train (1 run, 2 epochs, card) ${train} s"
done
