#!/usr/bin/env bash
# What the star-rating model costs against the beta-binomial on the same
# sellers, side by side in one run (benches/generate_stars.py: sellers with
# lognormal numbers of ratings, median 12, and star counts from a Dirichlet;
# 1,396,422 distinct count vectors at 10M sellers against 81,166 distinct
# (positive, total) pairs):
#   beta-binomial:          4 and 5 stars counted as positive, out of all ratings;
#   dirichlet-multinomial:  the five star counts, each seller's mean score.
# Runs alternate, each timed with /usr/bin/time (wall, peak memory); medians
# and the ratio at the end (failing above 13 x or above 300 MB), then the I/O floor of each
# table by polars. The target: at most 2 x the beta-binomial run, peak memory at most 300 MB.
#
# usage: benches/star_ratings.sh [SELLERS]        default: 10000000
# env:   RUNS (3), PYTHON (python3),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
sellers="${1:-10000000}"
source "$(dirname "$0")/common/timed_runs.sh"
input="$data/stars-$sellers.parquet"
[[ -f "$input" ]] || "$python" benches/generate_stars.py "$sellers" "$input"
log="$data/star-ratings.tsv"
: > "$log"
for run in $(seq "$runs"); do
  timed "$log" "$sellers" beta-binomial -- "$ratepool" --quiet fit --model beta-binomial --input "$input" \
    --group seller_id --successes positive --trials total --output "$data/stars-bb.parquet"
  timed "$log" "$sellers" dirichlet-multinomial -- "$ratepool" --quiet fit --model dirichlet-multinomial \
    --input "$input" --group seller_id --level-counts stars_1,stars_2,stars_3,stars_4,stars_5 \
    --output "$data/stars-dm.parquet" --summary "$data/stars-dm.json"
done
"$python" -c "import json,sys; s=json.load(open(sys.argv[1])); print('distinct count vectors', s['distinct_vectors'], 'of', s['groups'], 'sellers')" \
  "$data/stars-dm.json"
# What reading the input and writing the same tables costs polars alone (benches/peer/star_io_floor.py):
# the floor under either run however cheap its fit and posteriors.
for variant in bb:positive,total dm:stars_1,stars_2,stars_3,stars_4,stars_5; do
  echo -n "io floor, polars, ${variant%%:*} table: "
  "$python" benches/peer/star_io_floor.py "$input" seller_id "${variant#*:}" "$data/stars-${variant%%:*}.parquet" \
    "$data/stars-floor.parquet"
done
# The time target (2x) is not met; 13x catches a slip from 11-12x. Peak memory is held to the 300 MB target.
"$python" benches/common/medians.py "$log" beta-binomial --at-most dirichlet-multinomial=13 \
  --peak-at-most dirichlet-multinomial=300
