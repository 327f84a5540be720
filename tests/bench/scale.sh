#!/usr/bin/env bash
# One large whole `tabcard train` (one run of 64-256-256-1, one epoch, bootstrap 200) at ROWS x 64
# float32 features, with `--jobs 1` and then `--jobs 2` (JOBS), each with its peak resident set and
# the wall time of each phase from the experiment's timing record. The data file is kept in
# BENCH_DIR (default target/bench) between runs; BENCHMARKS.md records the latest figures.
#
#   bash tests/bench/scale.sh            ROWS=1000000 JOBS="2" bash tests/bench/scale.sh
set -euo pipefail
cd "$(dirname "$0")/../.."
work="${BENCH_DIR:-target/bench}"
mkdir -p "$work"
work="$(cd "$work" && pwd)"
cargo build --release --quiet --bin tabcard --example bench
for jobs in ${JOBS:-1 2}; do
  python3 -c "
import sys
sys.path.insert(0, 'tests/bench')
import driver
driver.whole_command_memory(print, '$work', ${ROWS:-10000000}, 64, jobs='$jobs', keep=True)
"
done
