#!/usr/bin/env bash
# Whole processes, as a user runs them: the release shell against the engine's own
# aggregates and against a polars script with hand formulas, each reading the same
# Parquet file (from the page cache: one untimed run first), start-up included.
# Median of RUNS (default 5) per task.
#
#   benches/process_bench.sh [ROWS] [LEVELS]      (default 10000000 30000)
#
# Needs `cargo build --release`, the data file from `cargo bench --bench fit -- --rows
# ROWS --levels LEVELS` and bench-data/.venv with polars (benches/compare.sh makes both).
set -euo pipefail
cd "$(dirname "$0")/.."
rows="${1:-10000000}"
levels="${2:-30000}"
runs="${RUNS:-5}"
file="bench-data/data_${rows}_${levels}.parquet"
bin=target/release/posterity
py=bench-data/.venv/bin/python
[ -f "$file" ] || { echo "missing $file: run cargo bench --bench fit -- --rows $rows --levels $levels" >&2; exit 1; }

# Each query returns one row, so printing costs nothing; every aggregate is used by
# the sum, so the optimiser cannot drop it.
prior="dirichlet_prior(['attended', 'no_show', 'late_cancellation', 'rescheduled'], 1)"
declare -A shell=(
  [baseline]="SELECT SUM(n + s) FROM (SELECT key, COUNT(*) AS n, SUM(y) AS s FROM t GROUP BY key)"
  [fit]="SELECT SUM(posterior_mean(p)) FROM (SELECT key, beta_posterior(y) AS p FROM t GROUP BY key)"
  [fit_dirichlet]="SELECT SUM(posterior_mean(p, 'no_show')) FROM (SELECT key, dirichlet_posterior(class, $prior) AS p FROM t GROUP BY key)"
  [baseline_classes]="SELECT SUM(a + b + c + d) FROM (SELECT key, COUNT(*) FILTER (WHERE class = 'attended') AS a, COUNT(*) FILTER (WHERE class = 'no_show') AS b, COUNT(*) FILTER (WHERE class = 'late_cancellation') AS c, COUNT(*) FILTER (WHERE class = 'rescheduled') AS d FROM t GROUP BY key)"
  [fit_join]="SELECT SUM(posterior_mean(e.p)) FROM t LEFT JOIN (SELECT key, beta_posterior(y) AS p FROM t GROUP BY key) e USING (key)"
  [startup]="SELECT 1"
)
# The same fit + join back + mean in polars, by hand (Jeffreys prior, as beta_posterior's default).
polars_fit_join='
import sys, polars as pl
df = pl.read_parquet(sys.argv[1], columns=["key", "y"])
enc = df.group_by("key").agg(pl.len().alias("n"), pl.col("y").sum().alias("s"))
enc = enc.with_columns(((pl.col("s") + 0.5) / (pl.col("n") + 1.0)).alias("mean"))
print(df.join(enc, on="key", how="left").select(pl.col("mean").sum()).item())
'
polars_startup='import polars'

median() { sort -n | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }
time_of() { # command... -> median wall seconds of $runs runs, after one untimed run
  "$@" >/dev/null
  for _ in $(seq "$runs"); do
    start=$(date +%s.%N)
    "$@" >/dev/null
    end=$(date +%s.%N)
    awk -v a="$start" -v b="$end" 'BEGIN {printf "%.3f\n", b - a}'
  done | median
}

declare -A t
for task in startup baseline fit baseline_classes fit_dirichlet fit_join; do
  t[$task]=$(time_of "$bin" -q -t "t=$file" -c "${shell[$task]}")
done
t[polars_fit_join]=$(time_of "$py" -c "$polars_fit_join" "$file")
t[polars_startup]=$(time_of "$py" -c "$polars_startup")

ratio() { awk -v a="$1" -v b="$2" 'BEGIN {printf "%.2f", a / b}'; }
echo "rows $rows, levels $levels, whole processes, median of $runs"
echo
echo "| work | seconds | ratio |"
echo "|---|---|---|"
echo "| shell start-up (SELECT 1) | ${t[startup]} | - |"
echo "| engine: COUNT(*), SUM(y) GROUP BY key | ${t[baseline]} | 1.00 |"
echo "| beta_posterior(y) GROUP BY key | ${t[fit]} | $(ratio "${t[fit]}" "${t[baseline]}") (vs COUNT/SUM) |"
echo "| engine: four COUNT(*) FILTER (class = ...) GROUP BY key | ${t[baseline_classes]} | $(ratio "${t[baseline_classes]}" "${t[baseline]}") (vs COUNT/SUM) |"
echo "| dirichlet_posterior(class) GROUP BY key | ${t[fit_dirichlet]} | $(ratio "${t[fit_dirichlet]}" "${t[baseline]}") (vs COUNT/SUM) |"
echo "| polars start-up (import polars) | ${t[polars_startup]} | - |"
echo "| polars: fit + join back + mean by hand | ${t[polars_fit_join]} | 1.00 |"
echo "| posterity: fit + join back + posterior_mean | ${t[fit_join]} | $(ratio "${t[fit_join]}" "${t[polars_fit_join]}") (vs polars) |"
