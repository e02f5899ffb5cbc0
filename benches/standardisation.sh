#!/usr/bin/env bash
# What standardisation costs, side by side in one run
# (benches/generate_area_strata.py: AREAS invented areas by five age bands,
# so 5 x AREAS rows of cases and population):
#   standardised: ratepool fit --population population --strata age_band
#                 (internal standard: the rows read twice, expected counts made);
#   expected:     the plain fit of one row per area with the expected counts
#                 already made (by DuckDB, once, before the runs): the same
#                 distinct pairs, the table an analyst would otherwise prepare;
#   summed:       ratepool fit --aggregate on the same rows with the
#                 population as exposure (whole numbers: far fewer distinct pairs).
# Runs alternate, each timed with /usr/bin/time (wall, peak memory); medians
# and ratios at the end. The target: standardised at most 1.5 x a plain fit.
#
# usage: benches/standardisation.sh [AREAS]        default: 2000000 (10M rows)
# env:   RUNS (3), PYTHON (python3),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs are made once and kept there)
source "$(dirname "$0")/common/timed_runs.sh"
areas="${1:-2000000}"
input="$data/area-strata-$areas.parquet"
expected="$data/area-expected-$areas.parquet"
[[ -f "$input" ]] || "$python" benches/generate_area_strata.py "$areas" "$input"
[[ -f "$expected" ]] || "$python" - "$input" "$expected" <<'PY'
import sys, duckdb
source, out = sys.argv[1], sys.argv[2]
duckdb.sql(f"""COPY (
    WITH r AS (SELECT age_band, sum(cases) / sum(population) AS rate FROM '{source}' GROUP BY age_band)
    SELECT area, sum(cases) AS cases, sum(population * rate) AS expected
    FROM '{source}' JOIN r USING (age_band) GROUP BY area
) TO '{out}' (FORMAT parquet)""")
PY
log="$data/standardisation.tsv"
: > "$log"
common=("$ratepool" --quiet fit --model gamma-poisson --group area --events cases
  --output "$data/standardisation-out.parquet")
for _ in $(seq "$runs"); do
  timed "$log" "$areas" standardised -- "${common[@]}" --input "$input" --population population --strata age_band
  timed "$log" "$areas" expected -- "${common[@]}" --input "$expected" --exposure expected
  timed "$log" "$areas" summed -- "${common[@]}" --input "$input" --aggregate --exposure population
done
"$python" benches/common/medians.py "$log" expected
