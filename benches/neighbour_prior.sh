#!/usr/bin/env bash
# The neighbour prior at the scale of a country's small areas, side by side in
# one run (benches/generate_hex_areas.py: COLUMNS x ROWS invented hexagonal
# areas, 6 neighbours each inside the grid, one row per area in CSV):
#   neighbours: ratepool neighbours --map (queen pairs from the GeoJSON map);
#   plain:      ratepool fit, one prior for all areas;
#   local:      ratepool fit --neighbours (each area's prior from its neighbourhood).
# Runs alternate, each timed with /usr/bin/time (wall, peak memory); medians
# and ratios to the plain fit at the end. The target: the neighbour prior on
# 100,000 areas in under a second.
#
# usage: benches/neighbour_prior.sh [COLUMNS ROWS]     default: 400 250 (100,000 areas)
# env:   RUNS (3), PYTHON (python3),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
source "$(dirname "$0")/common/timed_runs.sh"
columns="${1:-400}"
rows="${2:-250}"
areas=$((columns * rows))
map="$data/hex-$areas.geojson"
input="$data/hex-$areas.csv"
pairs="$data/hex-$areas-pairs.csv"
[[ -f "$map" && -f "$input" ]] || "$python" benches/generate_hex_areas.py "$columns" "$rows" "$map" "$input"
"$ratepool" neighbours --map "$map" --key area --output "$pairs"
log="$data/neighbour_prior.tsv"
: > "$log"
common=("$ratepool" --quiet fit --model gamma-poisson --input "$input" --group area --events events
  --exposure expected --above 1.2 --flag-fdr 0.1 --output "$data/neighbour-prior-out.csv")
for _ in $(seq "$runs"); do
  timed "$log" "$areas" neighbours -- "$ratepool" neighbours --map "$map" --key area --output "$pairs"
  timed "$log" "$areas" plain -- "${common[@]}"
  timed "$log" "$areas" local -- "${common[@]}" --neighbours "$pairs"
done
"$python" benches/common/medians.py "$log" plain
# The target, checked: the neighbour prior's whole run under a second.
"$python" - "$log" <<'PY'
import statistics, sys
walls = [float(line.split("\t")[2]) for line in open(sys.argv[1]) if line.split("\t")[1] == "local"]
median = statistics.median(walls)
print(f"fit --neighbours: median {median:.2f} s (target under 1 s: {'met' if median < 1.0 else 'NOT met'})")
sys.exit(0 if median < 1.0 else 1)
PY
