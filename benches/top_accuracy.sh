#!/usr/bin/env bash
# How close prob_top (--top K) is to its exact value: a convergence study.
# The exact value is stood in for by 100,000 joint draws (each averaging
# exact tail probabilities, so its own error is far below the figures here);
# against it: 500, 2,000 and 10,000 draws (the default is 1e8 / groups, at
# least 2,000 and at most 100,000: 5,000 for 20,000 groups), and the threshold
# method. Two tables from the demo data: all 20,000 sellers with K = 20, and
# the first 2,000 with K = 5 (few groups and a small K are where the
# threshold, exact only in the limit of many groups, is furthest off).
# Prints the largest absolute difference over all groups and the wall time.
#
# usage: benches/top_accuracy.sh > benches/results/prob-top-accuracy.txt
set -euo pipefail
cd "$(dirname "$0")/.."
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-/var/tmp/ratepool-target}"
cargo build --release --quiet --bins
ratepool="$CARGO_TARGET_DIR/release/ratepool"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
head -2001 demo-data/marketplace.csv > "$work/first-2000.csv"
columns=(--model beta-binomial --group seller_id --successes positive_ratings --trials total_ratings)
echo "ratepool $(git rev-parse --short HEAD 2>/dev/null || echo unknown), $(nproc) cores"
for table in "demo-data/marketplace.csv 20" "$work/first-2000.csv 5"; do
  read -r input k <<< "$table"
  runs=("draws 100000" "draws 500" "draws 2000" "draws 10000" "threshold 2000")
  for run in "${runs[@]}"; do
    read -r method draws <<< "$run"
    start=$(date +%s.%N)
    "$ratepool" --quiet fit "${columns[@]}" --input "$input" --top "$k" --top-method "$method" \
      --top-draws "$draws" --output "$work/$method-$draws.csv"
    echo "$method $draws $(echo "$(date +%s.%N) - $start" | bc)" >> "$work/times"
  done
  python3 - "$work" "$(basename "$input")" "$k" <<'PY'
import csv, sys
work, name, k = sys.argv[1:]
def top(run):
    return [float(r["prob_top"]) for r in csv.DictReader(open(f"{work}/{run}.csv"))]
times = {tuple(l.split()[:2]): float(l.split()[2]) for l in open(f"{work}/times")}
exact = top("draws-100000")
print(f"\n{name}: {len(exact)} groups, K = {k}; against 100,000 draws ({times[('draws', '100000')]:.1f} s)")
print(f"{'method':>22}  {'largest |difference|':>20}  {'wall':>7}")
for run, label in [("draws-500", "500 draws"), ("draws-2000", "2,000 draws"),
                   ("draws-10000", "10,000 draws"), ("threshold-2000", "threshold")]:
    got = top(run)
    worst = max(abs(a - b) for a, b in zip(got, exact))
    method, draws = run.split("-")
    print(f"{label:>22}  {worst:20.5f}  {times[(method, draws)]:6.2f}s")
PY
  rm -f "$work/times"
done
