#!/usr/bin/env bash
# Side-by-side: posterity vs the engine's own aggregates, DuckDB, polars and pandas,
# on the same Parquet file, in one run. Usage: benches/compare.sh [ROWS] [LEVELS]
set -euo pipefail
cd "$(dirname "$0")/.."
rows="${1:-10000000}"
levels="${2:-30000}"
dir=bench-data
mkdir -p "$dir"
echo "== posterity (cargo bench --bench fit)"
cargo bench --bench fit -- --rows "$rows" --levels "$levels" --data "$dir"
echo "== peers (virtual environment in $dir/.venv)"
if [ ! -x "$dir/.venv/bin/python" ]; then
  python3 -m venv "$dir/.venv"
  "$dir/.venv/bin/pip" install --quiet duckdb polars pandas pyarrow
fi
"$dir/.venv/bin/python" benches/peers.py "$dir/data_${rows}_${levels}.parquet" "$dir/peers_${rows}_${levels}.json"
echo "== side by side (median seconds; ratio = posterity / peer, below 1 means posterity is faster)"
python3 - "$dir/posterity_${rows}_${levels}.json" "$dir/peers_${rows}_${levels}.json" <<'PY'
import json, sys
ours, peers = json.load(open(sys.argv[1])), json.load(open(sys.argv[2]))
tasks = [("baseline", "group-by COUNT/SUM (engine baseline)"), ("fit", "fit Beta posterior per level"),
         ("fit_nig", "fit Normal posterior per level"), ("join_engine", "join encodings back + mean"),
         ("fit_join", "fit + join back + mean"), ("oof5", "5-fold out-of-fold encodings")]
ours_for = {"baseline": "baseline", "fit": "fit", "fit_nig": "fit_nig", "join_engine": "join_reader",
            "fit_join": "fit_join", "oof5": "oof5"}
print("| task | posterity | duckdb | polars | pandas | ratio vs duckdb | vs polars | vs pandas |")
print("|---|---|---|---|---|---|---|---|")
for key, label in tasks:
    p = ours[ours_for[key]]
    row = [label, f"{p:.3f}"]
    vals = [peers.get(f"{tool}:{key}") for tool in ("duckdb", "polars", "pandas")]
    row += [f"{v:.3f}" if v else "-" for v in vals]
    row += [f"{p / v:.2f}" if v else "-" for v in vals]
    print("| " + " | ".join(row) + " |")
PY
