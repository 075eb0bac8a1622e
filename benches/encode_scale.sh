#!/usr/bin/env bash
# `posterity encode` as the training table grows: wall time and peak memory of the
# whole process, 3 keys (30,000 / 20,000 / 50 levels, Zipf-like), 5 folds, reader mean.
#
#   benches/encode_scale.sh ROWS [ROWS ...]      (e.g. 10000000 100000000)
#
# Needs `cargo build --release` and target/modeling-venv (numpy, pyarrow) to write
# the data: Parquet files of 10 M rows each under target/encode-scale/ (not committed).
set -euo pipefail
cd "$(dirname "$0")/.."
bin=target/release/posterity
for rows in "$@"; do
  data=target/encode-scale/data-$rows
  mkdir -p "$data"
  if [ ! -f "$data/done" ]; then
    target/modeling-venv/bin/python - "$rows" "$data" <<'PY'
import sys
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
rows, out = int(sys.argv[1]), sys.argv[2]
rng = np.random.default_rng(11)
def key(levels, n, prefix):
    k = np.minimum(rng.zipf(1.3, n), levels) - 1
    names = pa.array([f"{prefix}{v:05d}" for v in range(levels)])
    return k, pa.DictionaryArray.from_arrays(pa.array(k, pa.int32()), names).cast(pa.string())
part, written = 0, 0
while written < rows:
    n = min(10_000_000, rows - written)
    k1, a1 = key(30_000, n, "k")
    k2, a2 = key(20_000, n, "m")
    k3, a3 = key(50, n, "s")
    rate = 0.05 + 0.1 * ((k1 * 2654435761) % 1000) / 1000 + 0.1 * ((k2 * 40503) % 100) / 100
    y = (rng.random(n) < rate).astype(np.int64)
    pq.write_table(pa.table({"key": a1, "key2": a2, "key3": a3, "y": y}), f"{out}/part-{part:03d}.parquet")
    part, written = part + 1, written + n
open(f"{out}/done", "w").close()
PY
  fi
  out=target/encode-scale/out-$rows
  /usr/bin/time -f "%e s %M KB" -o target/encode-scale/time-$rows \
    "$bin" -q encode --train "$data" --target y --columns key,key2,key3 --readers mean \
    --out "$out" ${ENCODE_ARGS:-} > /dev/null
  echo "$rows rows: $(cat target/encode-scale/time-$rows)"
done
