"""Reads ratepool's Parquet output with the readers its users have (pyarrow,
polars, DuckDB, from PyPI) and checks every value against ratepool's own CSV
output of the same run.

The Parquet writer of the pair-valued columns is the project's own
(src/io/pair_chunks.rs: per-column dictionaries, one shared index stream,
format v2 pages); this script is the check that other readers agree. It
runs ratepool on the demo data (the marketplace with flags and ranks, the
sellers with covariates, the returns by store kind from trial rows) and on an invented table with rows
of zero trials (nulls in raw_proportion), segments with a null one, more than one
row group and many pages.

Besides the values it checks the schema pyarrow reports (counts int64, or
float64 for exposure and estimates; rates and posteriors float64; the group
id text; flags boolean), that every column chunk is zstd-compressed, that the
pair-valued columns are dictionary-encoded, and the footer's key-value
metadata (model, prior, level, interval method, version).

usage (from the repository root, after `cargo build --release`), or
`bash scripts/check_output_readers.sh`, which installs the readers first:
    python3 scripts/check_output_readers.py [path/to/ratepool]
"""
import json
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
    model = footer.get(b"ratepool.model", b"").decode()
    assert model in ("beta-binomial", "gamma-poisson", "normal-normal"), f"{label}: no model in the footer"
    prior = json.loads(footer[b"ratepool.prior"])
    # A covariate prior has coefficients in place of one mean's standard error.
    assert "mean" in prior and ("mean_se" in prior or "coefficients" in prior), f"{label}: the footer's prior {prior}"
    for key in (b"ratepool.version", b"ratepool.level", b"ratepool.intervals"):
        assert key in footer, f"{label}: no {key} in the footer"
    check_schema(parquet_path, model, names, label)
    raw = "smr" if "smr" in names else RAW_COLUMNS[model]
    total = duckdb.sql(
        f"SELECT count(*), count({raw}), count(*) FILTER (WHERE flagged) FROM '{parquet_path}'"
    ).fetchall()[0]
    print(f"{label}: pyarrow, polars and DuckDB read {len(expected)} rows equal to the CSV output; "
          f"DuckDB counts {total[0]} rows, {total[0] - total[1]} null raw rates, {total[2]} flagged")


RAW_COLUMNS = {"beta-binomial": "raw_proportion", "gamma-poisson": "raw_rate", "normal-normal": "raw_estimate"}
FLOATS = set(RAW_COLUMNS.values()) | {"smr", "prior_mean", "posterior_mean", "posterior_sd", "interval_lo", "interval_hi", "pool_weight",
          "prob_above", "prob_below", "prob_top", "flag_fdr"}
INTEGERS = {"rank_mean", "rank_conservative"}
BOOLEANS = {"flagged", "prior_fallback"}


def check_schema(parquet_path, model, names, label):
    """Types as pyarrow reads them, zstd everywhere, dictionaries for the pair-valued columns."""
    import pyarrow as pa
    file = pq.ParquetFile(parquet_path)
    schema = file.schema_arrow
    assert pa.types.is_string(schema.field(0).type) or pa.types.is_integer(schema.field(0).type), schema.field(0)
    for field in schema:
        if field.name in FLOATS or field.name.startswith("posterior_"):
            assert field.type == pa.float64(), f"{label}: {field}"
        elif field.name in INTEGERS:
            assert field.type == pa.int64(), f"{label}: {field}"
        elif field.name in BOOLEANS:
            assert field.type == pa.bool_(), f"{label}: {field}"
    # The count and size columns follow the group (and segment) columns.
    counted = [f for f in schema if f.name not in FLOATS | INTEGERS | BOOLEANS and not f.name.startswith("posterior_")]
    count, size = counted[-2], counted[-1]
    whole = {"beta-binomial": (pa.int64(), pa.int64()), "gamma-poisson": (pa.int64(), pa.float64()),
             "normal-normal": (pa.float64(), pa.float64())}[model]
    assert (count.type, size.type) == whole, f"{label}: {count}, {size} for {model}"
    metadata = file.metadata
    for g in range(metadata.num_row_groups):
        for c in range(metadata.num_columns):
            chunk = metadata.row_group(g).column(c)
            assert chunk.compression == "ZSTD", f"{label}: {chunk.path_in_schema} is {chunk.compression}"
            if c > 0 and chunk.physical_type != "BOOLEAN":
                assert "RLE_DICTIONARY" in chunk.encodings, f"{label}: {chunk.path_in_schema} {chunk.encodings}"


def main():
    with tempfile.TemporaryDirectory() as tmp:
        demo = ["--model", "beta-binomial", "--group", "seller_id", "--successes", "positive_ratings",
                "--trials", "total_ratings", "--above", "0.95", "--flag-fdr", "0.1", "--ranks"]
        for ext in ("parquet", "csv"):
            run("demo-data/marketplace.csv", os.path.join(tmp, f"demo.{ext}"), demo)
        check(os.path.join(tmp, "demo.parquet"), os.path.join(tmp, "demo.csv"), "demo marketplace")

        # Covariates: the level column written from codes, the numbers, and prior_mean.
        sellers = ["--model", "beta-binomial", "--group", "seller_id", "--successes", "positive_ratings",
                   "--trials", "total_ratings", "--covariates", "category", "--covariates-log", "tenure_months",
                   "--ranks", "--above", "0.9", "--flag-fdr", "0.1"]
        for ext in ("parquet", "csv"):
            run("demo-data/sellers.csv", os.path.join(tmp, f"sellers.{ext}"), sellers)
        check(os.path.join(tmp, "sellers.parquet"), os.path.join(tmp, "sellers.csv"), "demo sellers with covariates")

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

        for name, args in [
            ("districts", ["--input", "demo-data/districts.csv", "--model", "gamma-poisson", "--group",
                           "district_id", "--events", "observed_cases", "--exposure", "expected_cases",
                           "--above", "1", "--flag-fdr", "0.1", "--intervals", "corrected"]),
            ("district_bands", ["--input", "demo-data/district_bands.csv", "--model", "gamma-poisson", "--group",
                                "district_id", "--events", "cases", "--population", "population", "--strata",
                                "age_band", "--above", "1.2", "--flag-fdr", "0.1", "--ranks"]),
            ("clinics", ["--input", "demo-data/clinic_waits.csv", "--model", "normal-normal", "--group",
                         "clinic_id", "--estimate", "mean_wait_minutes", "--std-error", "wait_se", "--by", "zone",
                         "--rank-lowest-first", "--below", "20", "--flag-fdr", "0.1"]),
        ]:
            for ext in ("parquet", "csv"):
                subprocess.run([RATEPOOL, "--quiet", "fit", *args, "--output", os.path.join(tmp, f"{name}.{ext}")],
                               check=True)
            check(os.path.join(tmp, f"{name}.parquet"), os.path.join(tmp, f"{name}.csv"), f"demo {name}")


if __name__ == "__main__":
    main()
