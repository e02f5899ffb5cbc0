#!/usr/bin/env bash
# What a free prior costs, side by side in one run on the same input
# (benches/generate_binomial.py, the lognormal mix: about 300,000 distinct
# pairs at 10M groups):
#   parametric: ratepool fit (a Beta prior);
#   free:       the same with --prior-shape free (the grid's masses by the
#               constrained Newton method, posteriors on the grid, and the
#               parametric prior fitted beside it for the summary's comparison);
#   corrected:  the parametric fit with --intervals corrected (each posterior a
#               mixture over 49 quadrature nodes, its interval by Halley's method).
# Runs alternate, each timed with /usr/bin/time (wall, peak memory); medians
# and the ratio at the end, with the free fit's iterations and duality gap.
# The targets: free and corrected each at most 2 x parametric (the script
# fails when a median misses one).
#
# usage: benches/free_prior.sh [GROUPS]        default: 10000000
# env:   RUNS (3), PYTHON (python3),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
groups="${1:-10000000}"
source "$(dirname "$0")/common/timed_runs.sh"
input="$data/segmented-lognormal-$groups.parquet"
[[ -f "$input" ]] || "$python" benches/generate_binomial.py "$groups" "$input" lognormal 10
log="$data/free-prior.tsv"
: > "$log"
base=(--quiet fit --model beta-binomial --input "$input" --group seller_id --successes positive_ratings
  --trials total_ratings --output "$data/free-out.parquet" --summary "$data/free-summary.json")
for run in $(seq "$runs"); do
  timed "$log" "$groups" parametric -- "$ratepool" "${base[@]}"
  timed "$log" "$groups" free -- "$ratepool" "${base[@]}" --prior-shape free
  "$python" -c "import json,sys; f=json.load(open(sys.argv[1]))['fit']; print('free fit: iterations', f['iterations'], 'duality gap per group', f['gradient_norm'], 'converged', f['converged'])" \
    "$data/free-summary.json"
  timed "$log" "$groups" corrected -- "$ratepool" "${base[@]}" --intervals corrected
done
"$python" benches/common/medians.py "$log" parametric --at-most free=2 --at-most corrected=2
