"""Writes one small table as Parquet the ways real producers write it.

Every file in tests/fixtures/producers/ holds the same invented sellers (fixed
seed), written by pyarrow, polars or DuckDB with a different codec, page
layout or column type. `tests/integration/producers.rs` runs ratepool on each
and checks that it writes the same bytes as from the CSV of the same table
(reference_text_ids.csv or reference_integer_ids.csv, also written here).

The matrix:
- pyarrow: codecs none, snappy, gzip, lz4 (LZ4_RAW), zstd, brotli, each with
  dictionary and plain pages and with data pages v1 and v2; count columns as
  int16, int32, int64, uint16, uint32, uint64, float32 and float64 (whole
  numbers); group ids as string, large_string and int64, nullable or not;
  ids dictionary-encoded as categorical.
- polars: every codec it writes, counts as Int32 and UInt32 and Float64.
- DuckDB: every codec it writes, counts as INTEGER, BIGINT, UBIGINT, DOUBLE,
  ids as VARCHAR (NOT NULL or not) and BIGINT.
The old Hadoop-framed LZ4 codec is written by none of these (all three write
LZ4_RAW for "lz4"); the test writes that one with arrow-rs itself.

Run from the repository root, with pyarrow, polars and duckdb from PyPI
(versions pinned in benches/requirements.txt):
    python3 scripts/make_producer_matrix.py
"""
import json
import os
import random

import duckdb
import polars as pl
import pyarrow as pa
import pyarrow.parquet as pq

OUT = "tests/fixtures/producers"
SEED = 20261203
ROWS = 120

CODECS = ["none", "snappy", "gzip", "lz4", "zstd", "brotli"]
POLARS_CODECS = ["uncompressed", "snappy", "gzip", "lz4", "zstd", "brotli"]
DUCKDB_CODECS = ["uncompressed", "snappy", "gzip", "lz4", "zstd", "brotli"]


def invented_sellers():
    rng = random.Random(SEED)
    ids, successes, trials = [], [], []
    for i in range(ROWS):
        n = min(30000, int(rng.lognormvariate(2.5, 1.8)))
        share = rng.betavariate(3, 12)
        k = sum(1 for _ in range(n) if rng.random() < share) if n < 2000 else round(n * share)
        ids.append(5000 + 7 * i)
        successes.append(k)
        trials.append(n)
    return ids, successes, trials


def write_csv(path, ids, successes, trials):
    with open(path, "w") as f:
        f.write("seller_id,positive,total\n")
        for g, k, n in zip(ids, successes, trials):
            f.write(f"{g},{k},{n}\n")


def arrow_table(ids, successes, trials, id_type, count_type, nullable):
    fields = [
        pa.field("seller_id", id_type, nullable=nullable),
        pa.field("positive", count_type, nullable=nullable),
        pa.field("total", count_type, nullable=nullable),
    ]
    as_id = (lambda g: f"s{g}") if pa.types.is_string(id_type) or pa.types.is_large_string(id_type) else int
    as_count = float if pa.types.is_floating(count_type) else int
    columns = [
        pa.array([as_id(g) for g in ids], id_type),
        pa.array([as_count(k) for k in successes], count_type),
        pa.array([as_count(n) for n in trials], count_type),
    ]
    return pa.Table.from_arrays(columns, schema=pa.schema(fields))


def main():
    os.makedirs(OUT, exist_ok=True)
    for old in os.listdir(OUT):
        os.remove(os.path.join(OUT, old))
    ids, successes, trials = invented_sellers()
    write_csv(f"{OUT}/reference_integer_ids.csv", ids, successes, trials)
    write_csv(f"{OUT}/reference_text_ids.csv", [f"s{g}" for g in ids], successes, trials)
    manifest = {}

    def record(name, text_ids):
        manifest[name] = "reference_text_ids.csv" if text_ids else "reference_integer_ids.csv"

    # pyarrow: codecs x dictionary x page version, string ids and int64 counts.
    base = arrow_table(ids, successes, trials, pa.string(), pa.int64(), True)
    for codec in CODECS:
        for dictionary in (True, False):
            for pages in ("1.0", "2.0"):
                name = f"pyarrow-{codec}-{'dict' if dictionary else 'plain'}-v{pages[0]}.parquet"
                pq.write_table(
                    base,
                    f"{OUT}/{name}",
                    compression=codec,
                    use_dictionary=dictionary,
                    data_page_version=pages,
                    row_group_size=50,
                )
                record(name, True)
    # pyarrow: column types, snappy (its default).
    count_types = {
        "int16": pa.int16(), "int32": pa.int32(), "int64": pa.int64(), "uint16": pa.uint16(),
        "uint32": pa.uint32(), "uint64": pa.uint64(), "float32": pa.float32(), "float64": pa.float64(),
    }
    id_types = {"string": pa.string(), "large_string": pa.large_string(), "int64": pa.int64()}
    for count_name, count_type in count_types.items():
        for id_name, id_type in id_types.items():
            for nullable in (True, False):
                table = arrow_table(ids, successes, trials, id_type, count_type, nullable)
                name = f"pyarrow-types-{id_name}-{count_name}-{'nullable' if nullable else 'required'}.parquet"
                pq.write_table(table, f"{OUT}/{name}")
                record(name, id_name != "int64")
    categorical = base.set_column(0, "seller_id", base.column("seller_id").dictionary_encode())
    pq.write_table(categorical, f"{OUT}/pyarrow-types-categorical-ids.parquet")
    record("pyarrow-types-categorical-ids.parquet", True)

    # polars: every codec; a few count types.
    frame = pl.DataFrame({"seller_id": [f"s{g}" for g in ids], "positive": successes, "total": trials})
    for codec in POLARS_CODECS:
        name = f"polars-{codec}.parquet"
        frame.write_parquet(f"{OUT}/{name}", compression=codec)
        record(name, True)
    for dtype_name, dtype in {"int32": pl.Int32, "uint32": pl.UInt32, "float64": pl.Float64}.items():
        name = f"polars-types-{dtype_name}.parquet"
        frame.with_columns(pl.col("positive").cast(dtype), pl.col("total").cast(dtype)).write_parquet(
            f"{OUT}/{name}"
        )
        record(name, True)

    # DuckDB: every codec; SQL types.
    con = duckdb.connect()
    con.execute("CREATE TABLE sellers (seller_id BIGINT, positive BIGINT, total BIGINT)")
    con.executemany("INSERT INTO sellers VALUES (?, ?, ?)", list(zip(ids, successes, trials)))
    for codec in DUCKDB_CODECS:
        name = f"duckdb-{codec}.parquet"
        con.execute(
            f"COPY (SELECT 's' || seller_id AS seller_id, positive, total FROM sellers) "
            f"TO '{OUT}/{name}' (FORMAT parquet, CODEC '{codec}')"
        )
        record(name, True)
    for sql_type in ("INTEGER", "BIGINT", "UBIGINT", "DOUBLE"):
        name = f"duckdb-types-{sql_type.lower()}.parquet"
        con.execute(
            f"COPY (SELECT 's' || seller_id AS seller_id, positive::{sql_type} AS positive, "
            f"total::{sql_type} AS total FROM sellers) TO '{OUT}/{name}' (FORMAT parquet)"
        )
        record(name, True)
    con.execute(
        "CREATE TABLE required (seller_id VARCHAR NOT NULL, positive INTEGER NOT NULL, total INTEGER NOT NULL)"
    )
    con.execute("INSERT INTO required SELECT 's' || seller_id, positive, total FROM sellers")
    con.execute(f"COPY required TO '{OUT}/duckdb-types-required.parquet' (FORMAT parquet)")
    record("duckdb-types-required.parquet", True)
    con.execute(f"COPY sellers TO '{OUT}/duckdb-types-bigint-ids.parquet' (FORMAT parquet)")
    record("duckdb-types-bigint-ids.parquet", False)

    versions = {"pyarrow": pa.__version__, "polars": pl.__version__, "duckdb": duckdb.__version__}
    with open(f"{OUT}/manifest.json", "w") as f:
        json.dump({"versions": versions, "seed": SEED, "files": manifest}, f, indent=1, sort_keys=True)
        f.write("\n")
    print(f"{len(manifest)} files written to {OUT} with {versions}")


if __name__ == "__main__":
    main()
