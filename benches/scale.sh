#!/usr/bin/env bash
# End-to-end scale benchmark, everything side by side in one run:
#   ratepool fit --stream (also with --progress, to show what reporting costs), the I/O floor (benches/io_floor.rs) and the pandas/scipy peer
#   (benches/peer/peer_pipeline.py) on the same synthetic inputs (benches/generate_binomial.py).
# Each is timed with /usr/bin/time (wall, peak resident memory); medians and ratios at the end.
#
# usage: benches/scale.sh [GROUPS ...]        default: 10000000 100000000
# env:   RUNS (3), PEER_AT (10000000: sizes at which the peer also runs), PYTHON (python3),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
set -euo pipefail
cd "$(dirname "$0")/.."
sizes=("${@:-10000000 100000000}")
read -r -a sizes <<< "${sizes[*]}"
runs="${RUNS:-3}"
peer_at=" ${PEER_AT:-10000000} "
python="${PYTHON:-python3}"
data="${BENCH_DATA:-/var/tmp/ratepool-bench}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-/var/tmp/ratepool-target}"
mkdir -p "$data"
cargo build --release --quiet --bins --bench io_floor
ratepool="$CARGO_TARGET_DIR/release/ratepool"
floor="$(ls -t "$CARGO_TARGET_DIR"/release/deps/io_floor-* | grep -v '\.d$' | head -1)"
log="$data/timings.tsv"
: > "$log"

timed() { # timed TOOL GROUPS RUN COMMAND...
  local tool=$1 groups=$2 run=$3
  shift 3
  /usr/bin/time -f "%e %M" -o "$data/time.txt" "$@" > /dev/null 2> "$data/stderr.txt" \
    || { cat "$data/stderr.txt"; exit 1; }
  read -r wall rss < "$data/time.txt"
  echo -e "$tool\t$groups\t$run\t$wall\t$((rss / 1024))" | tee -a "$log"
}

for groups in "${sizes[@]}"; do
  input="$data/groups-$groups.parquet"
  [[ -f "$input" ]] || "$python" benches/generate_binomial.py "$groups" "$input"
done
echo -e "tool\tgroups\trun\twall_s\tpeak_mb"
for run in $(seq "$runs"); do
  for groups in "${sizes[@]}"; do
    input="$data/groups-$groups.parquet"
    timed ratepool "$groups" "$run" "$ratepool" --quiet fit --stream --model beta-binomial \
      --input "$input" --group seller_id --successes positive_ratings --trials total_ratings \
      --output "$data/ratepool.parquet" --summary "$data/summary.json"
    timed ratepool_progress "$groups" "$run" "$ratepool" --quiet --progress fit --stream \
      --model beta-binomial --input "$input" --group seller_id --successes positive_ratings \
      --trials total_ratings --output "$data/ratepool.parquet" --summary "$data/summary.json"
    timed io_floor "$groups" "$run" "$floor" "$input" seller_id positive_ratings total_ratings \
      "$data/floor.parquet"
    if [[ "$peer_at" == *" $groups "* ]]; then
      timed peer "$groups" "$run" "$python" benches/peer/peer_pipeline.py "$input" "$data/peer.parquet"
    fi
  done
done
for groups in "${sizes[@]}"; do
  for threads in 1 2; do
    "$ratepool" --quiet --timings --threads "$threads" fit --stream --model beta-binomial \
      --input "$data/groups-$groups.parquet" --group seller_id --successes positive_ratings \
      --trials total_ratings --output "$data/ratepool.parquet" 2>&1 \
      | sed "s/^/threads=$threads groups=$groups /"
  done
done
"$python" - "$log" <<'PY'
import statistics, sys, collections
rows = collections.defaultdict(list)
for line in open(sys.argv[1]):
    tool, groups, _, wall, rss = line.split("\t")
    rows[(tool, int(groups))].append((float(wall), int(rss)))
print("\ntool\tgroups\tmedian_wall_s\tmax_peak_mb")
median = {}
for (tool, groups), values in sorted(rows.items(), key=lambda kv: (kv[0][1], kv[0][0])):
    median[(tool, groups)] = statistics.median(w for w, _ in values)
    print(f"{tool}\t{groups}\t{median[(tool, groups)]:.2f}\t{max(r for _, r in values)}")
for (tool, groups), wall in sorted(median.items()):
    if tool == "ratepool":
        floor = median.get(("io_floor", groups))
        peer = median.get(("peer", groups))
        print(f"groups={groups}: ratepool / io_floor = {wall / floor:.2f}" if floor else "", end="")
        print(f", peer / ratepool = {peer / wall:.1f}" if peer else "", end="")
        watched = median.get(("ratepool_progress", groups))
        print(f", with --progress / without = {watched / wall:.3f}" if watched else "")
PY
