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
set -euo pipefail
cd "$(dirname "$0")/.."
sellers="${1:-1000000}"
runs="${RUNS:-3}"
python="${PYTHON:-python3}"
data="${BENCH_DATA:-/var/tmp/ratepool-bench}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-/var/tmp/ratepool-target}"
mkdir -p "$data"
cargo build --release --quiet --bins
ratepool="$CARGO_TARGET_DIR/release/ratepool"
log="$data/rating-rows.tsv"
: > "$log"
for format in ${FORMATS:-parquet csv}; do
  input="$data/ratings-$sellers.$format"
  [[ -f "$input" ]] || "$python" benches/generate_ratings.py "$sellers" "$input"
  for run in $(seq "$runs"); do
    for variant in ratepool duckdb; do
      case $variant in
        ratepool) command=("$ratepool" --quiet fit --model beta-binomial --input "$input" --group seller_id
                    --outcome positive --output "$data/rating-rows-out.parquet" --summary "$data/rating-rows.json") ;;
        duckdb) command=("$python" benches/peer/duckdb_group_by.py "$input" "$data/rating-rows-duckdb.parquet") ;;
      esac
      sync
      /usr/bin/time -f "%e %M" -o "$data/time.txt" "${command[@]}" > /dev/null 2> "$data/stderr.txt" \
        || { cat "$data/stderr.txt"; exit 1; }
      read -r wall rss < "$data/time.txt"
      echo -e "$format\t$variant\t$run\t$wall\t$((rss / 1024))" | tee -a "$log"
    done
  done
done
"$python" - "$log" <<'PY'
import collections, statistics, sys
times, memory = collections.defaultdict(list), collections.defaultdict(list)
for line in open(sys.argv[1]):
    form, variant, _, wall, peak = line.split("\t")
    times[form, variant].append(float(wall))
    memory[form, variant].append(int(peak))
for form in dict.fromkeys(f for f, _ in times):
    ours, peer = statistics.median(times[form, "ratepool"]), statistics.median(times[form, "duckdb"])
    print(f"{form:>8}: ratepool {ours:6.2f} s (peak {max(memory[form, 'ratepool'])} MB), "
          f"DuckDB GROUP BY {peer:6.2f} s (peak {max(memory[form, 'duckdb'])} MB): {ours / peer:.2f} x DuckDB")
PY
