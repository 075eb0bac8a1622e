#!/usr/bin/env bash
# `posterity encode` as the number of keys grows: wall time and peak memory of the
# whole process on 200,000 rows with 40 text keys (53 to 2,003 levels each), a 0/1
# target, the defaults (5 folds, reader mean, indicator columns for the largest
# levels), the same rows scored.
#
#   benches/many_keys.sh [KEYS ...]      (default: 10 20 40)
#
# Needs `cargo build --release` (or POSTERITY_BIN=another build, to compare); the data is written by the shell itself under
# target/many-keys/ (not committed).
set -euo pipefail
cd "$(dirname "$0")/.."
bin=${POSTERITY_BIN:-target/release/posterity}
dir=target/many-keys
data=$dir/rows.parquet
mkdir -p "$dir"
if [ ! -f "$data" ]; then
  columns=""
  for i in $(seq 1 40); do
    columns+=", 'c${i}_' || CAST((v * $((i * 7919)) + $i) % $((i * 50 + 3)) AS VARCHAR) AS k$i"
  done
  "$bin" -q -c "COPY (SELECT v AS id, CAST(v * 2654435761 % 1000 < 200 AS INT) AS y $columns
                FROM generate_series(1, 200000) g(v)) TO '$data' STORED AS PARQUET"
fi
for n in "${@:-10 20 40}"; do
  for keys in $n; do
    list=$(seq -f "k%g" 1 "$keys" | paste -sd,)
    rm -rf "$dir/out"
    /usr/bin/time -f "$keys keys: %e s, peak %M KB" \
      "$bin" encode -q --train "$data" --target y --columns "$list" --score "$data" --out "$dir/out" \
      > /dev/null
  done
done
