#!/usr/bin/env bash
# Checks ratepool's Parquet output with the readers its users have, on a clean
# machine: makes a virtual environment (in VENV, default a temporary folder),
# installs pyarrow, polars and DuckDB from PyPI (pinned in
# scripts/readers-requirements.txt), builds ratepool, and runs
# scripts/check_output_readers.py: schema, footer metadata and every value
# read by each client against ratepool's own CSV output, and a DuckDB query.
#
# usage: bash scripts/check_output_readers.sh [VENV]
set -euo pipefail
cd "$(dirname "$0")/.."
venv="${1:-$(mktemp -d)/venv}"
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
fi
"$venv/bin/pip" install --quiet --disable-pip-version-check -r scripts/readers-requirements.txt
cargo build --quiet --release --locked
"$venv/bin/python" scripts/check_output_readers.py "${CARGO_TARGET_DIR:-target}/release/ratepool"
