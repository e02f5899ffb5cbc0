# Shared by the whole-command benchmarks (sourced, not run): the settings
# every one takes from the environment, the release build, and one timed run.
#
# After `source benches/common/timed_runs.sh`: $runs, $python, $data,
# $ratepool are set, the binary built, and
#   timed LOG LABEL... -- COMMAND...
# runs COMMAND once under /usr/bin/time (wall seconds, peak memory), its
# output thrown away (its errors shown if it fails), and appends the labels,
# the wall time and the peak MB as one tab-separated line to LOG (and shows it).
# `python3 benches/common/medians.py LOG BASE` then prints each label's median.
set -euo pipefail
cd "$(dirname "${BASH_SOURCE[0]}")/../.."
runs="${RUNS:-3}"
python="${PYTHON:-python3}"
data="${BENCH_DATA:-/var/tmp/ratepool-bench}"
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-/var/tmp/ratepool-target}"
mkdir -p "$data"
cargo build --release --quiet --bins
ratepool="$CARGO_TARGET_DIR/release/ratepool"

timed() {
  local log="$1" labels=()
  shift
  while [[ "$1" != "--" ]]; do labels+=("$1"); shift; done
  shift
  sync
  /usr/bin/time -f "%e %M" -o "$data/time.txt" "$@" > /dev/null 2> "$data/stderr.txt" \
    || { cat "$data/stderr.txt"; exit 1; }
  local wall rss
  read -r wall rss < "$data/time.txt"
  (IFS=$'\t'; echo -e "${labels[*]}\t$wall\t$((rss / 1024))") | tee -a "$log"
}
