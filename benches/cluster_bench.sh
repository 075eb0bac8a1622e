#!/usr/bin/env bash
# posterity on one process vs a Ballista cluster of 1 and 2 executors on this machine:
# time of a whole `posterity` command and peak memory (VmHWM) of every process.
#
#   benches/cluster_bench.sh [ROWS] [LEVELS]     (defaults 10000000 30000)
#   BENCH=encode benches/cluster_bench.sh ...     `posterity encode` of the key instead
#                                                 (5 folds, reader mean; --work-dir on a cluster)
#
# Needs `cargo build --release --workspace` and target/modeling-venv (numpy, pyarrow)
# to write the data (a Zipf-like key, a 0/1 target; not committed).
set -euo pipefail
cd "$(dirname "$0")/.."
rows=${1:-10000000}
levels=${2:-30000}
bin=target/release
data=target/cluster-bench/data-$rows
mkdir -p "$data"
if [ ! -f "$data/part-0.parquet" ]; then
  target/modeling-venv/bin/python - "$rows" "$levels" "$data" <<'PY'
import sys
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
rows, levels, out = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
rng = np.random.default_rng(7)
parts = 8
for p in range(parts):
    n = rows // parts
    k = np.minimum(rng.zipf(1.3, n), levels) - 1
    rate = 0.05 + 0.2 * ((k * 2654435761) % 1000) / 1000
    y = (rng.random(n) < rate).astype(np.int64)
    pq.write_table(pa.table({"key": pa.array([f"k{v:05d}" for v in k]), "y": y}),
                   f"{out}/part-{p}.parquet")
PY
fi
sql="SELECT key, posterior_mean(p) AS m, posterior_quantile(p, 0.05) AS q05 FROM (SELECT key, beta_posterior(y, beta_prior(1, 1)) AS p FROM t GROUP BY key)"
peak() { awk '/VmHWM/ {printf "%.0f MiB", $2/1024}' "/proc/$1/status"; }
run() { # label, extra args
  local label=$1; shift
  local start end
  start=$(date +%s.%N)
  if [ "${BENCH:-sql}" = encode ]; then
    local work=()
    [ "$#" -gt 0 ] && work=(--work-dir target/cluster-bench/encode-work)
    /usr/bin/time -f "%M" -o /tmp/cluster-bench-client "$bin/posterity" -q "$@" encode --train "$data" \
      --target y --columns key --out target/cluster-bench/encode-out --replace "${work[@]}" > /dev/null
  else
    /usr/bin/time -f "%M" -o /tmp/cluster-bench-client "$bin/posterity" -q "$@" -t "t=$data" --format csv -c "$sql" > /dev/null
  fi
  end=$(date +%s.%N)
  printf "%-28s %6.2f s  client peak %s MiB" "$label" "$(echo "$end - $start" | bc)" "$(( $(cat /tmp/cluster-bench-client) / 1024 ))"
}
echo "rows $rows, levels $levels"
for r in 1 2 3; do run "single process"; echo; done
for executors in 1 2; do
  port=$((52000 + executors * 10))
  "$bin/posterity-scheduler" --bind-host 127.0.0.1 --external-host 127.0.0.1 --port $port > /dev/null 2>&1 &
  sched=$!
  sleep 1
  pids=()
  for i in $(seq 1 $executors); do
    rm -rf "target/cluster-bench/work-$i"; mkdir -p "target/cluster-bench/work-$i"
    "$bin/posterity-executor" --scheduler-host 127.0.0.1 --scheduler-port $port \
      --port $((port + 2 * i)) --grpc-port $((port + 2 * i + 1)) \
      --concurrent-tasks $((2 / executors)) --work-dir "target/cluster-bench/work-$i" > /dev/null 2>&1 &
    pids+=($!)
  done
  sleep 3
  run "cluster, warm-up" --cluster "df://127.0.0.1:$port" > /dev/null
  for r in 1 2; do run "cluster, $executors executor(s)" --cluster "df://127.0.0.1:$port"; echo; done
  run "cluster, $executors executor(s)" --cluster "df://127.0.0.1:$port"
  printf "  scheduler %s" "$(peak $sched)"
  # Shuffle files of the four jobs (a warm-up and three runs) kept in the work dirs.
  printf "  shuffle files %s bytes per job" "$(du -sb target/cluster-bench/work-* | awk '{s += $1} END {print int(s / 4)}')"
  for p in "${pids[@]}"; do printf "  executor %s" "$(peak $p)"; done
  echo
  kill "${pids[@]}" $sched 2>/dev/null || true
  wait 2>/dev/null || true
done
