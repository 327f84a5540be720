#!/usr/bin/env bash
# One run on 1 and 2 threads against PyTorch on 1 and 2 threads (tests/bench/threads.py): builds
# the bench program, installs PyTorch, numpy and pyarrow from PyPI into a local virtual environment
# (or uses BENCH_VENV), then prints medians and ratios; BENCHMARKS.md records the latest.
#
#   bash tests/bench/threads.sh            REPS=5 bash tests/bench/threads.sh
set -euo pipefail
cd "$(dirname "$0")/../.."
work="${BENCH_DIR:-target/bench}"
mkdir -p "$work"
work="$(cd "$work" && pwd)"
cargo build --release --quiet --example bench
venv="${BENCH_VENV:-$work/venv}"
if ! { [[ -x "$venv/bin/python" ]] && "$venv/bin/python" -c "import torch, numpy, pyarrow" 2>/dev/null; }; then
  python3 -m venv "$venv"
  "$venv/bin/pip" install --quiet --disable-pip-version-check torch numpy pyarrow
fi
python3 tests/bench/threads.py "$work" "$venv/bin/python" "${REPS:-3}"
