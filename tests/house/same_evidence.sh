#!/usr/bin/env bash
# Behaviour unchanged by a restructuring: trains both demo experiments with two tabcard binaries
# and compares every file of the two results folders byte for byte, except the timing records
# (they hold wall times) and, in each run's environment.json, the build's source commit
# (`tool_commit`, which names the build itself) and that file's hash in the run's checksums.json.
# Exit 0 when every other byte agrees.
#
#   bash tests/house/same_evidence.sh OLD_TABCARD NEW_TABCARD [WORK_DIR]
set -euo pipefail
cd "$(dirname "$0")/../.."
old="$1"; new="$2"; work="${3:-$(mktemp -d)}"
for side in old new; do
  bin="${!side}"
  rm -rf "$work/$side"
  for exp in experiments/lease-default.toml experiments/greenhouse-yield.toml; do
    "$bin" train "$exp" --results "$work/$side" --jobs 2 --quiet >/dev/null
  done
  # Mask what names the build or the clock.
  find "$work/$side" -name environment.json -exec sed -i 's/"tool_commit": "[^"]*"/"tool_commit": "(masked)"/' {} +
  find "$work/$side" -name checksums.json -exec sed -i 's/"environment.json": "[^"]*"/"environment.json": "(masked)"/' {} +
  find "$work/$side" -name timing.json -delete
  rm -f "$work/$side/ledger.jsonl"
done
# The card and the lists name environment.json's hash and the trained-at time: compare the
# evidence files, then the cards with those lines masked. (From layout 4 the evidence list holds
# no environment and could be compared as it is; records.sha256 names the environment.)
diff -r -q -x card.md -x integrity.sha256 -x records.sha256 "$work/old" "$work/new"
for card in "$work"/old/*/card.md; do
  rel="${card#"$work/old/"}"
  diff <(grep -v -e '^\*\*Trained at' -e '^| tabcard |' -e 'results digest' "$card") \
       <(grep -v -e '^\*\*Trained at' -e '^| tabcard |' -e 'results digest' "$work/new/$rel")
done
echo "same evidence: every file of both demo experiments agrees ($(find "$work/old" -type f | wc -l) files compared; timing records and the build's commit masked)"
