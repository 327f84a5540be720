#!/usr/bin/env bash
# tabcard's benchmark, one reproducible run: builds tabcard and its bench program in release,
# installs PyTorch (CPU use only), numpy and pyarrow from PyPI into a local virtual environment,
# then runs tests/bench/driver.py, which times each tabcard measurement and its reference
# alternately and prints medians, ratios and the share of the single-core matmul peak.
# PyTorch comparisons are skipped, with a message, when PyPI is unreachable.
#
#   bash tests/bench/run.sh            REPS=5 bash tests/bench/run.sh
#
# Figures land in target/bench/summary.txt; BENCHMARKS.md records the latest with its machine.
set -euo pipefail
cd "$(dirname "$0")/../.."
work="${BENCH_DIR:-target/bench}"
mkdir -p "$work"
work="$(cd "$work" && pwd)"
cargo build --release --bin tabcard --example bench

venv="${BENCH_VENV:-$work/venv}"
torch_arg=()
if [[ -x "$venv/bin/python" ]] && "$venv/bin/python" -c "import torch, numpy, pyarrow" 2>/dev/null; then
  torch_arg=(--torch "$venv/bin/python")
elif python3 -m venv "$venv" >/dev/null 2>&1 \
  && "$venv/bin/pip" install --quiet --disable-pip-version-check torch numpy pyarrow >"$work/pip.log" 2>&1; then
  torch_arg=(--torch "$venv/bin/python")
else
  echo "PyTorch skipped: could not install torch, numpy and pyarrow from PyPI (see $work/pip.log)"
fi
# The previous engine (tabcard 0.2.0 over the gemm crate), built once into $work/previous, for the
# engine-against-engine case; skipped with a message when the commit is not in this clone.
previous_commit="${PREVIOUS_COMMIT:-2e98f60}"
previous_arg=()
if [[ ! -x "$work/previous-target/release/examples/bench" ]] && git cat-file -e "$previous_commit^{commit}" 2>/dev/null; then
  rm -rf "$work/previous"
  git worktree add --force --detach "$work/previous" "$previous_commit" >/dev/null 2>&1 || true
  (cd "$work/previous" && CARGO_TARGET_DIR="$work/previous-target" cargo build --release --example bench) || true
fi
if [[ -x "$work/previous-target/release/examples/bench" ]]; then
  previous_arg=(--previous "$work/previous-target/release/examples/bench")
else
  echo "previous engine skipped: commit $previous_commit is not available"
fi
python3 tests/bench/driver.py "$work" --reps "${REPS:-3}" "${torch_arg[@]}" "${previous_arg[@]}"
