#!/usr/bin/env bash
# Times the two candidate Parquet writers side by side: ROWS rows of ten float
# columns, each writer in its own process, RUNS alternating runs, wall time and
# peak resident memory from /usr/bin/time. Usage: benches/parquet_writers.sh [ROWS] [RUNS]
set -euo pipefail
cd "$(dirname "$0")/.."
rows="${1:-10000000}"
runs="${2:-3}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-/var/tmp/ratepool-target}"
cargo build --release --bench parquet_writers --quiet
bench="$(ls -t "$CARGO_TARGET_DIR"/release/deps/parquet_writers-* | grep -v '\.d$' | head -1)"
out="$(mktemp -d)"
trap 'rm -rf "$out"' EXIT
echo -e "writer\trows\twall\tfile\tpeak_rss"
for run in $(seq "$runs"); do
  for writer in arrow polars; do
    line=$(/usr/bin/time -f "%M" -o "$out/rss" "$bench" "$writer" "$rows" "$out/$writer.parquet")
    echo -e "$line\t$(( $(cat "$out/rss") / 1024 )) MB"
  done
done
