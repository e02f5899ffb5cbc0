#!/usr/bin/env bash
# ratepool.fit on a polars frame against the command line on the same rows as
# Parquet, side by side in one run (benches/generate_binomial.py, the pareto
# mix: 10M sellers). The package is built as a user builds it
# (`pip install ./python`, the release profile) into a virtual environment
# kept in $BENCH_DATA.
# Each Python run is timed twice: the whole process (interpreter start and
# the Parquet read into polars included), and the `ratepool.fit` call alone
# (benches/python_fit.py), which is what a notebook holding the frame pays;
# the script fails when the call alone takes more than 1.5 x the command line.
# Last, the driver's share of ratepool.spark.fit: fit_pairs on the key table
# of the same rows (benches/python_fit_pairs.py).
#
# usage: benches/python_fit.sh [GROUPS]        default: 10000000
# env:   RUNS (3), PYTHON (python3, with numpy and pyarrow to generate the input),
#        BENCH_DATA (/var/tmp/ratepool-bench: inputs and the venv are made once and kept there)
groups="${1:-10000000}"
source "$(dirname "$0")/common/timed_runs.sh"
input="$data/pareto-$groups.parquet"
[[ -f "$input" ]] || "$python" benches/generate_binomial.py "$groups" "$input"
venv="$data/python-venv"
if [[ ! -x "$venv/bin/python" ]]; then
  "$python" -m venv "$venv"
  "$venv/bin/pip" install --quiet --disable-pip-version-check maturin==1.16.0 polars==2.1.0 pyarrow==26.0.1
fi
# The package as a user builds it (release), from this tree; incremental when the target folder is warm.
started=$(date +%s)
PATH="$venv/bin:$PATH" "$venv/bin/pip" install --quiet --disable-pip-version-check --no-build-isolation \
  --no-deps --force-reinstall ./python
echo "pip install ./python: $(( $(date +%s) - started )) s (target folder $CARGO_TARGET_DIR)"
log="$data/python-fit.tsv"
seconds="$data/python-fit-seconds.txt"
: > "$log"
: > "$seconds"
for run in $(seq "$runs"); do
  timed "$log" "$groups" command-line -- "$ratepool" --quiet fit --model beta-binomial --input "$input" \
    --group seller_id --successes positive_ratings --trials total_ratings --output "$data/python-cli-out.parquet"
  timed "$log" "$groups" python -- "$venv/bin/python" benches/python_fit.py "$input" "$seconds"
done
"$python" benches/common/medians.py "$log" command-line
# The call alone against the command line's whole run: the target is at most 1.5 x (exit 1 if not).
"$python" - "$log" "$seconds" <<'CHECK'
import statistics, sys
cli = statistics.median(float(l.split("\t")[2]) for l in open(sys.argv[1]) if "\tcommand-line\t" in l)
call = statistics.median(float(l) for l in open(sys.argv[2]))
print(f"ratepool.fit call alone: median {call:.2f} s, {call / cli:.2f} x the command line's {cli:.2f} s")
sys.exit(0 if call <= 1.5 * cli else "the call alone takes more than 1.5 x the command line")
CHECK
# The driver's share of ratepool.spark.fit: fit_pairs on the rows' key table.
"$venv/bin/python" benches/python_fit_pairs.py "$input" "$runs"
