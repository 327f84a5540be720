#!/usr/bin/env bash
# Trains the lease demo on a table whose split is a column (so numpy knows the training rows),
# monitors a fresh batch, a drifted one and one with outcomes, then recomputes the stored edges,
# counts, stability indices and chi-square tests with numpy and scipy (monitor_check.py).
# Usage: monitor_check.sh <python with numpy, scipy, pyarrow> <tabcard binary>
set -euo pipefail
python="$1"
tabcard="$(cd "$(dirname "$2")" && pwd)/$(basename "$2")"
here="$(cd "$(dirname "$0")" && pwd)"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
cd "$work"
"$tabcard" demo-data train --seed 3 >/dev/null
"$tabcard" demo-data batch --seed 4 >/dev/null
"$python" - <<'PY'
import numpy as np, pyarrow as pa, pyarrow.parquet as pq
t = pq.read_table("train/lease-applications.parquet")
part = np.array(["train", "train", "train", "validation", "test"])[np.arange(t.num_rows) % 5]
pq.write_table(t.append_column("part", pa.array(part)), "leases.parquet")
b = pq.read_table("batch/lease-applications.parquet")
pq.write_table(b.drop(["defaulted_12m"]), "fresh.parquet")
credit = b.column("owner_credit_score").to_numpy(zero_copy_only=False)
shifted = pa.array(credit + 0.25 * np.nanstd(credit), from_pandas=True)
i = b.schema.get_field_index("owner_credit_score")
pq.write_table(b.set_column(i, "owner_credit_score", shifted), "drifted.parquet")
PY
printf '%s\n' '[experiment]' 'name = "lease-monitoring-check"' '[data]' 'path = "leases.parquet"' 'target = "defaulted_12m"' \
  'task = "binary"' 'ids = ["application_id"]' 'categorical = ["term_months"]' '[split]' 'column = "part"' '[model]' 'hidden = [16]' \
  '[training]' 'epochs = 8' 'batch_size = 128' '[selection]' 'bootstrap = 200' '[sweep]' 'seeds = [1, 2]' > lease.toml
"$tabcard" train lease.toml --results results --quiet >/dev/null
folder="$(ls -d results/*/ | head -1)"
status=0
for batch in fresh.parquet drifted.parquet; do
  "$tabcard" monitor "$folder" "$batch" >/dev/null || status=$?
  if [ "$status" -ne 0 ] && [ "$status" -ne 8 ] && [ "$status" -ne 9 ]; then exit "$status"; fi
done
"$python" "$here/monitor_check.py" "$folder" leases.parquet part fresh.parquet drifted.parquet
