#!/usr/bin/env bash
# Scale-out test on a real single-node SLURM cluster: the demo lease sweep submitted as a job
# array (tabcard slurm --submit, 4 array tasks of 4 runs, then the dependent merge job) must give
# a results folder byte-identical to a local `--jobs 2` sweep, apart from timing fields
# (timing.json files, the card's "Trained at" line and the card's line in records.sha256). Each task's outcome is read from
# tabcard's own stored results (the merge job reports 0 runs trained), since without an
# accounting database there is no sacct.
#
# Installs slurm-wlm and munge with apt-get when missing; skips (exit 0, with a message) only when
# they cannot be installed. Called by .ci/run after the cargo test suite, which built the binary.
set -euo pipefail
cd "$(dirname "$0")/../.."
repo="$(pwd)"

if [[ "$(id -u)" -ne 0 ]]; then
  echo "skipped: not root, so apt-get cannot install slurm-wlm and munge and slurmd cannot start jobs"
  exit 0
fi
if ! command -v slurmctld >/dev/null || ! command -v munged >/dev/null; then
  echo "installing slurm-wlm and munge"
  if ! { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq slurm-wlm munge; } >/tmp/tabcard-slurm-apt.log 2>&1; then
    echo "skipped: apt-get could not install slurm-wlm and munge (see /tmp/tabcard-slurm-apt.log)"
    exit 0
  fi
fi

# The test build's binary (same features as the suite, so nothing rebuilds after `cargo test`).
cargo test --release --no-run --quiet
tabcard="$repo/target/release/tabcard"
work="$(mktemp -d "${TMPDIR:-/tmp}/tabcard-slurm.XXXXXX")"
cluster="$work/cluster"
cleanup() { bash "$repo/tests/slurm/cluster.sh" down "$cluster" >/dev/null 2>&1 || true; rm -rf "$work"; }
trap cleanup EXIT
bash tests/slurm/cluster.sh up "$cluster"
export SLURM_CONF="$cluster/slurm.conf"

manifest="$repo/experiments/lease-default.toml"
echo "== local sweep, --jobs 2"
"$tabcard" train "$manifest" --results "$work/local" --jobs 2 > "$work/local.txt"
tail -n 3 "$work/local.txt"

echo "== the same sweep as a SLURM job array"
"$tabcard" slurm "$manifest" --results "$work/cluster-results" --cpus-per-task 1 --runs-per-task 4 --mem 2G --submit > "$work/slurm.txt"
cat "$work/slurm.txt"
array_job="$(sed -n 's/^submitted array job \([0-9]*\) and merge job \([0-9]*\).*/\1/p' "$work/slurm.txt")"
merge_job="$(sed -n 's/^submitted array job \([0-9]*\) and merge job \([0-9]*\).*/\2/p' "$work/slurm.txt")"
tasks="$(sed -n 's/^#SBATCH --array=0-\([0-9]*\)$/\1/p' "$work/slurm.txt")"
[[ -n "$array_job" && -n "$merge_job" ]] || { echo "FAIL: no job ids in the slurm command's output"; exit 1; }
(( tasks + 1 >= 4 )) || { echo "FAIL: expected at least 4 array tasks, got $((tasks + 1))"; exit 1; }

started=$SECONDS
while [[ -n "$(squeue -h -j "$array_job,$merge_job" -o %i 2>/dev/null)" ]]; do
  if (( SECONDS - started > 1200 )); then echo "FAIL: jobs still queued or running after 20 minutes"; squeue; exit 1; fi
  sleep 1
done
echo "array and merge jobs finished in $((SECONDS - started)) s"

logs="$(ls -d "$work"/cluster-results/slurm/*/logs)"
for k in $(seq 0 "$tasks"); do
  log="$logs/array-${array_job}_$k.out"
  grep -q "^shard $k/$((tasks + 1)): .* 0 failed" "$log" || { echo "FAIL: array task $k did not finish its shard:"; cat "$log"; exit 1; }
done
merge_log="$logs/merge-$merge_job.out"
grep -q "runs: 0 trained, 15 reused, 0 failed, 15 planned" "$merge_log" || { echo "FAIL: the merge job had to train runs the array should have:"; cat "$merge_log"; exit 1; }

echo "== compare the two results folders"
fp="$(ls "$work/local" | grep -v ledger.jsonl)"
[[ -d "$work/cluster-results/$fp" ]] || { echo "FAIL: no results folder $fp from the cluster"; exit 1; }
for side in local cluster-results; do
  find "$work/$side/$fp" -name card.md -exec sed -i '/Trained at/d' {} +
  # The card's line in records.sha256 follows its "Trained at" line; the evidence list
  # (integrity.sha256, whose hash is the results digest) must agree byte for byte.
  sed -i '/  card\.md$/d' "$work/$side/$fp/records.sha256"
done
if diff -r -x timing.json "$work/local/$fp" "$work/cluster-results/$fp"; then
  files="$(find "$work/local/$fp" -type f ! -name timing.json | wc -l)"
  echo "slurm array sweep: $((tasks + 1)) tasks, results folder identical to the local sweep ($files files): 1 passed, 0 failed"
else
  echo "FAIL: the cluster's results folder differs from the local sweep"
  exit 1
fi
