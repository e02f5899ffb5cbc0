#!/usr/bin/env bash
# One row per rating, summed per seller, side by side in one run on the same
# file (benches/generate_ratings.py: about 100M rating rows for 1M sellers,
# shuffled; text ids as pyarrow writes them):
#   ratepool: ratepool fit --outcome positive (sum, fit, score, write);
#   duckdb:   DuckDB's GROUP BY of the same rows to Parquet
#             (benches/peer/duckdb_group_by.py), the sums alone.
# For each format (Parquet, then CSV) the two alternate, each timed with
# /usr/bin/time (wall, peak memory); medians and the ratio at the end.
# The target: ratepool at most 1.5 x DuckDB, peak memory at most 1 GB.
#
# usage: benches/rating_rows.sh [SELLERS]        default: 1000000
# env:   RUNS (3), PYTHON (python3), FORMATS ("parquet csv"),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
source "$(dirname "$0")/common/timed_runs.sh"
sellers="${1:-1000000}"
log="$data/rating-rows.tsv"
: > "$log"
for format in ${FORMATS:-parquet csv}; do
  input="$data/ratings-$sellers.$format"
  [[ -f "$input" ]] || "$python" benches/generate_ratings.py "$sellers" "$input"
  for _ in $(seq "$runs"); do
    timed "$log" "$format" ratepool -- "$ratepool" --quiet fit --model beta-binomial --input "$input" \
      --group seller_id --outcome positive --output "$data/rating-rows-out.parquet" --summary "$data/rating-rows.json"
    timed "$log" "$format" duckdb -- "$python" benches/peer/duckdb_group_by.py "$input" "$data/rating-rows-duckdb.parquet"
  done
done
"$python" benches/common/medians.py "$log" duckdb
