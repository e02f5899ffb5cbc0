#!/usr/bin/env bash
# The Python package's tests on a clean machine: a fresh virtual environment
# (VENV, default a temporary folder), the test requirements from PyPI
# (python/tests/requirements.txt), the package built from this tree by
# `pip install ./python`, then pytest, Spark in local mode included (it needs
# a Java runtime). Run after `cargo test`, which builds the command line the
# tests compare against.
#
# The wheel is built with the dev profile, which shares every compiled crate
# with `cargo test`; a user's `pip install ./python` builds the release profile.
#
# usage: bash python/run_tests.sh [VENV]
set -euo pipefail
cd "$(dirname "$0")/.."
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$PWD/target}"
venv="${1:-$(mktemp -d)/venv}"
if [ ! -x "$venv/bin/python" ]; then
  python3 -m venv "$venv"
fi
"$venv/bin/pip" install --quiet --disable-pip-version-check -r python/tests/requirements.txt
PATH="$venv/bin:$PATH" MATURIN_PEP517_ARGS="--profile dev" \
  "$venv/bin/pip" install --quiet --disable-pip-version-check --no-build-isolation --force-reinstall --no-deps ./python
# Spark's Python workers must run the environment's interpreter, which has pyarrow.
PYSPARK_PYTHON="$venv/bin/python" RATEPOOL_REQUIRE_SPARK=1 RATEPOOL_BIN="$CARGO_TARGET_DIR/debug/ratepool" \
  "$venv/bin/python" -m pytest -q -p no:cacheprovider python/tests
