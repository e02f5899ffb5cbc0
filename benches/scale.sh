#!/usr/bin/env bash
# End-to-end scale benchmark, everything side by side in one run, on the same
# synthetic inputs (benches/generate_binomial.py, lognormal mix: about 300,000
# distinct pairs at 10M groups), each as Parquet, as CSV, and as CSV with text ids in double
# quotes as most exporters write them ("g000000001",2,21: format `quoted`):
#   ratepool fit (the default command; also with --progress, to show what reporting costs),
#   the I/O floor (benches/io_floor.rs: one read, the same writer, no computation),
#   the strong peer (benches/peer/strong_peer.py: polars + scipy on the distinct pairs),
#   the pandas peer (benches/peer/peer_pipeline.py: pandas + scipy row by row, Parquet only).
# Each is timed with /usr/bin/time (wall, peak resident memory); medians and ratios at the end.
#
# usage: benches/scale.sh [GROUPS ...]        default: 1000000 10000000 100000000
# env:   RUNS (3), PEER_AT (sizes where the strong peer runs: "1000000 10000000"),
#        PEER_AT_LEAST (2.2: the script exits 1 below it, or above the memory targets),
#        PANDAS_AT (sizes where the pandas peer runs: "1000000"), PYTHON (python3),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
set -euo pipefail
cd "$(dirname "$0")/.."
sizes=("${@:-1000000 10000000 100000000}")
read -r -a sizes <<< "${sizes[*]}"
runs="${RUNS:-3}"
peer_at=" ${PEER_AT:-1000000 10000000} "
pandas_at=" ${PANDAS_AT:-1000000} "
python="${PYTHON:-python3}"
data="${BENCH_DATA:-/var/tmp/ratepool-bench}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-/var/tmp/ratepool-target}"
mkdir -p "$data"
cargo build --release --quiet --bins --bench io_floor
ratepool="$CARGO_TARGET_DIR/release/ratepool"
floor="$(ls -t "$CARGO_TARGET_DIR"/release/deps/io_floor-* | grep -v '\.d$' | head -1)"
log="$data/timings.tsv"
: > "$log"

timed() { # timed TOOL FORMAT GROUPS RUN COMMAND...
  local tool=$1 format=$2 groups=$3 run=$4
  shift 4
  sync  # earlier outputs are written back first, not during the next run
  /usr/bin/time -f "%e %M" -o "$data/time.txt" "$@" > /dev/null 2> "$data/stderr.txt" \
    || { cat "$data/stderr.txt"; exit 1; }
  read -r wall rss < "$data/time.txt"
  echo -e "$tool\t$format\t$groups\t$run\t$wall\t$((rss / 1024))" | tee -a "$log"
}

columns=(--group seller_id --successes positive_ratings --trials total_ratings)
for groups in "${sizes[@]}"; do
  for format in parquet csv quoted; do
    input="$data/heavy-$groups.${format/quoted/quoted.csv}"
    [[ -f "$input" ]] || "$python" benches/generate_binomial.py "$groups" "$input" lognormal
  done
done
echo -e "tool\tformat\tgroups\trun\twall_s\tpeak_mb"
for run in $(seq "$runs"); do
  for groups in "${sizes[@]}"; do
    for format in parquet csv quoted; do
      input="$data/heavy-$groups.${format/quoted/quoted.csv}"
      timed ratepool "$format" "$groups" "$run" "$ratepool" --quiet fit --model beta-binomial \
        --input "$input" "${columns[@]}" --output "$data/ratepool.parquet" --summary "$data/summary.json"
      timed ratepool_progress "$format" "$groups" "$run" "$ratepool" --quiet --progress fit \
        --model beta-binomial --input "$input" "${columns[@]}" --output "$data/ratepool.parquet" \
        --summary "$data/summary.json"
      timed io_floor "$format" "$groups" "$run" "$floor" "$input" seller_id positive_ratings \
        total_ratings "$data/floor.parquet"
      if [[ "$peer_at" == *" $groups "* ]]; then
        timed strong_peer "$format" "$groups" "$run" "$python" benches/peer/strong_peer.py "$input" \
          "$data/peer.parquet"
      fi
      if [[ "$pandas_at" == *" $groups "* && "$format" == parquet ]]; then
        timed pandas_peer "$format" "$groups" "$run" "$python" benches/peer/peer_pipeline.py "$input" \
          "$data/pandas.parquet"
      fi
    done
  done
done
for groups in "${sizes[@]}"; do
  for threads in 1 2; do
    "$ratepool" --quiet --timings --threads "$threads" fit --model beta-binomial \
      --input "$data/heavy-$groups.parquet" "${columns[@]}" --output "$data/ratepool.parquet" 2>&1 \
      | sed "s/^/threads=$threads groups=$groups /"
  done
done
"$python" - "$log" "${PEER_AT_LEAST:-2.2}" <<'PY'
import statistics, sys, collections
rows = collections.defaultdict(list)
for line in open(sys.argv[1]):
    tool, fmt, groups, _, wall, rss = line.split("\t")
    rows[(tool, fmt, int(groups))].append((float(wall), int(rss)))
print("\ntool\tformat\tgroups\tmedian_wall_s\tmax_peak_mb")
median = {}
for (tool, fmt, groups), values in sorted(rows.items(), key=lambda kv: (kv[0][2], kv[0][1], kv[0][0])):
    median[(tool, fmt, groups)] = statistics.median(w for w, _ in values)
    print(f"{tool}\t{fmt}\t{groups}\t{median[(tool, fmt, groups)]:.2f}\t{max(r for _, r in values)}")
print()
for (tool, fmt, groups), wall in sorted(median.items(), key=lambda kv: (kv[0][2], kv[0][1])):
    if tool != "ratepool":
        continue
    parts = [f"groups={groups} {fmt}: ratepool / io_floor = {wall / median[('io_floor', fmt, groups)]:.2f}"]
    for peer in ("strong_peer", "pandas_peer"):
        if (peer, fmt, groups) in median:
            parts.append(f"{peer} / ratepool = {median[(peer, fmt, groups)] / wall:.2f}")
    watched = median.get(("ratepool_progress", fmt, groups))
    if watched:
        parts.append(f"with --progress / without = {watched / wall:.3f}")
    print(", ".join(parts))
# The figures the README quotes, as checks that fail when they stop holding: ratepool's peak
# within the issue's targets (200 MB up to 10M groups, 1 GB beyond), and the strong peer at
# least PEER_AT_LEAST times ratepool's time (2.2 by default, below the 2.37x to 2.66x measured
# pair by pair at dd4a8c9; the issue's 3x is not met).
peer_at_least = float(sys.argv[2])
missed = []
for (tool, fmt, groups), values in rows.items():
    limit = 200 if groups <= 10_000_000 else 1024
    if tool == "ratepool" and max(r for _, r in values) > limit:
        missed.append(f"{fmt} {groups}: peak {max(r for _, r in values)} MB, at most {limit}")
    peer = median.get(("strong_peer", fmt, groups))
    if tool == "ratepool" and peer and peer / median[(tool, fmt, groups)] < peer_at_least:
        missed.append(f"{fmt} {groups}: strong peer at {peer / median[(tool, fmt, groups)]:.2f} x ratepool, at least {peer_at_least}")
if missed:
    sys.exit("target missed: " + "; ".join(missed))
PY
