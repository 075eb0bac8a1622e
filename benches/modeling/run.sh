#!/usr/bin/env bash
# Held-out modeling evaluation (MODELING.md): creates a virtual environment with the
# learner and the data packages, builds posterity, prints the table.
#   benches/modeling/run.sh           the held-out table (evaluate.py)
#   benches/modeling/run.sh --shift   training vs scored feature distributions (shift.py)
set -euo pipefail
cd "$(dirname "$0")/../.."
venv=target/modeling-venv
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
  "$venv/bin/pip" install -q -r benches/modeling/requirements.txt
fi
cargo build --release -q
script=evaluate.py
if [ "${1:-}" = "--shift" ]; then
  script=shift.py
  shift
fi
POSTERITY_BIN=target/release/posterity "$venv/bin/python" "benches/modeling/$script" "$@"
