"""Reads ratepool's Parquet output with the readers its users have (pyarrow,
polars, DuckDB, from PyPI) and checks every value against ratepool's own CSV
output of the same run.

The Parquet writer of the pair-valued columns is the project's own
(src/io/pair_chunks.rs: per-column dictionaries, one shared index stream,
format v2 pages); this script is the check that other readers agree. It
runs ratepool on the demo data (the marketplace with flags and ranks, the
returns by store kind from trial rows) and on an invented table with rows
of zero trials (nulls in raw_rate), segments with a null one, more than one
row group and many pages.

usage (from the repository root, after `cargo build --release`):
    python3 scripts/check_output_readers.py [path/to/ratepool]
"""
import csv
import math
import os
import random
import subprocess
import sys
import tempfile

import duckdb
import polars as pl
import pyarrow.parquet as pq

RATEPOOL = sys.argv[1] if len(sys.argv) > 1 else "target/release/ratepool"


def run(input_path, out, args):
    subprocess.run([RATEPOOL, "--quiet", "fit", "--input", input_path, "--output", out, *args], check=True)


def csv_rows(path):
    with open(path, newline="") as f:
        return list(csv.DictReader(f))


def same(csv_value, value):
    if csv_value == "":
        return value is None
    if isinstance(value, str):
        return csv_value == value
    if isinstance(value, bool):
        return csv_value == ("true" if value else "false")
    if isinstance(value, int) and not isinstance(value, bool):
        return int(csv_value) == value
    return float(csv_value) == value or (math.isnan(float(csv_value)) and math.isnan(value))


def check(parquet_path, csv_path, label):
    expected = csv_rows(csv_path)
    names = list(expected[0].keys())
    tables = {
        "pyarrow": pq.read_table(parquet_path).to_pylist(),
        "polars": pl.read_parquet(parquet_path).to_dicts(),
        "duckdb": [
            dict(zip(names, row)) for row in duckdb.sql(f"SELECT * FROM '{parquet_path}'").fetchall()
        ],
    }
    for reader, rows in tables.items():
        assert len(rows) == len(expected), f"{label} {reader}: {len(rows)} rows, expected {len(expected)}"
        for i, (got, want) in enumerate(zip(rows, expected)):
            for name in names:
                if not same(want[name], got[name]):
                    raise SystemExit(f"{label} {reader}: row {i + 1} {name}: {got[name]!r} != {want[name]!r}")
    footer = pq.read_metadata(parquet_path).metadata or {}
    assert footer.get(b"ratepool.model") in (b"beta-binomial", b"gamma-poisson"), f"{label}: no model in the footer"
    assert b"ratepool.hyperprior" in footer, f"{label}: no prior in the footer"
    total = duckdb.sql(
        f"SELECT count(*), count(raw_rate), count(*) FILTER (WHERE flagged) FROM '{parquet_path}'"
    ).fetchall()[0]
    print(f"{label}: pyarrow, polars and DuckDB read {len(expected)} rows equal to the CSV output; "
          f"DuckDB counts {total[0]} rows, {total[0] - total[1]} null raw rates, {total[2]} flagged")


def main():
    with tempfile.TemporaryDirectory() as tmp:
        demo = ["--model", "beta-binomial", "--group", "seller_id", "--successes", "positive_ratings",
                "--trials", "total_ratings", "--above", "0.95", "--flag-fdr", "0.1", "--ranks"]
        for ext in ("parquet", "csv"):
            run("demo-data/marketplace.csv", os.path.join(tmp, f"demo.{ext}"), demo)
        check(os.path.join(tmp, "demo.parquet"), os.path.join(tmp, "demo.csv"), "demo marketplace")

        rng = random.Random(20261204)
        invented = os.path.join(tmp, "invented-input.csv")
        with open(invented, "w") as f:
            f.write("id,zone,k,n\n")
            for i in range(1_200_000):
                n = rng.choice([0, 1, 2, 3, 5, 8, 13, 40, 200])
                zone = rng.choice(["north", "south", "east", ""])  # empty: a null segment
                f.write(f"g{i},{zone},{rng.randint(0, n)},{n}\n")
        args = ["--model", "beta-binomial", "--group", "id", "--successes", "k", "--trials", "n",
                "--below", "0.3", "--flag-fdr", "0.2", "--by", "zone"]
        for ext in ("parquet", "csv"):
            run(invented, os.path.join(tmp, f"invented.{ext}"), args)
        check(os.path.join(tmp, "invented.parquet"), os.path.join(tmp, "invented.csv"), "invented 1.2M rows")

        trials = ["--model", "beta-binomial", "--group", "store_id", "--outcome", "returned",
                  "--by", "store_kind", "--top", "10", "--ranks", "--above", "0.1", "--flag-fdr", "0.1"]
        for ext in ("parquet", "csv"):
            run("demo-data/returns.csv", os.path.join(tmp, f"returns.{ext}"), trials)
        check(os.path.join(tmp, "returns.parquet"), os.path.join(tmp, "returns.csv"), "demo returns by kind")


if __name__ == "__main__":
    main()
