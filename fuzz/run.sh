#!/usr/bin/env bash
# Coverage-guided fuzzing with libFuzzer on the stable toolchain (no nightly needed):
# instrumentation through stable -C flags. Usage: fuzz/run.sh [SECONDS_PER_TARGET]
set -euo pipefail
cd "$(dirname "$0")"
seconds="${1:-60}"
export RUSTFLAGS="-Cpasses=sancov-module -Cllvm-args=-sanitizer-coverage-level=4 \
 -Cllvm-args=-sanitizer-coverage-inline-8bit-counters -Cllvm-args=-sanitizer-coverage-pc-table \
 -Cllvm-args=-sanitizer-coverage-trace-compares --cfg fuzzing"
# An explicit --target keeps the instrumentation flags off build scripts.
triple="$(rustc -vV | sed -n 's/^host: //p')"
cargo build --release --bins --target "$triple"
for target in family_math stored_posteriors; do
  mkdir -p "corpus/$target" "artifacts/$target"
  echo "== $target for $seconds s"
  ./target/"$triple"/release/$target -max_total_time="$seconds" -print_final_stats=1 \
    -artifact_prefix="artifacts/$target/" "corpus/$target" 2>&1 | grep -E "stat::|Done|SUMMARY|panicked|ERROR" || true
done
