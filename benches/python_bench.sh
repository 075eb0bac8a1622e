#!/usr/bin/env bash
# posterity from Python vs the Rust shell (BENCHMARKS.md, "From Python").
# Usage: benches/python_bench.sh [ROWS] [LEVELS]
set -euo pipefail
cd "$(dirname "$0")/.."
rows="${1:-10000000}"
levels="${2:-30000}"
data="bench-data/data_${rows}_${levels}.parquet"
[ -f "$data" ] || cargo bench --bench fit -- --rows "$rows" --levels "$levels" --data bench-data
cargo build --release -q
venv=bench-data/.python-venv
[ -x "$venv/bin/python" ] || python3 -m venv "$venv"
"$venv/bin/pip" install -q "datafusion>=55,<56" pyarrow pandas "maturin>=1.5,<2"
PATH="$PWD/$venv/bin:$PATH" "$venv/bin/pip" install -q --no-deps --force-reinstall --no-build-isolation ./python
"$venv/bin/python" benches/python_bench.py target/release/posterity "$data"
