"""Synthetic beta-binomial inputs for the scale benchmarks, as Parquet or CSV
(by the output's extension).

Each group is an invented seller with a number of ratings, a true positive
share and a binomial number of positive ratings. Two mixes:
- `pareto` (default): ratings are the floor of 3 times a Pareto variable of
  tail index 1.1, less 2 (at least 1, median 3, capped at 200,000), shares
  from Beta(18, 2); about 60,000 distinct pairs at 10M groups;
- `lognormal`: ratings = min(20000, round(lognormal(ln 20, 1.8))), shares
  from Beta(3, 12); about 300,000 distinct pairs at 10M groups, a heavier
  mix.
With a fourth argument K > 0 a `category` column of K invented labels
(`category-0` ...) is added, drawn after the other columns from the same
stream, so the other columns are the same with or without it.
Rows are made in chunks of 1M, each chunk from its own stream of a fixed seed,
so a file of N groups is the same whatever machine makes it.
An output named `*.quoted.csv` holds the ids as text (`g000000001`), which
pyarrow's CSV writer, like most exporters, puts in double quotes
(`"g000000001",2,21`); the counts are the same as in the other files.

usage: python3 benches/generate_binomial.py GROUPS OUT.parquet|OUT.csv|OUT.quoted.csv [pareto|lognormal] [K]
"""
import sys

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

SEED = 20261202
CHUNK = 1_000_000


def chunk(stream: np.random.Generator, first_id: int, rows: int, mix: str, categories: int,
          text_ids: bool = False) -> pa.Table:
    if mix == "lognormal":
        ratings = np.minimum(20_000, np.round(stream.lognormal(np.log(20.0), 1.8, rows))).astype(np.int64)
        share = stream.beta(3.0, 12.0, rows)
    else:
        ratings = np.minimum(np.floor(3.0 * (stream.pareto(1.1, rows) + 1.0)) - 2.0, 200_000).astype(np.int64)
        share = stream.beta(18.0, 2.0, rows)
    positive = stream.binomial(ratings, share).astype(np.int64)
    ids = np.arange(first_id, first_id + rows, dtype=np.int64)
    if text_ids:
        ids = pa.array(np.char.add("g", np.char.zfill(ids.astype(str), 9)))
    columns = {"seller_id": ids, "positive_ratings": positive, "total_ratings": ratings}
    if categories > 0:
        labels = np.array([f"category-{i}" for i in range(categories)])
        columns["category"] = labels[stream.integers(0, categories, rows)]
    return pa.table(columns)


def main() -> None:
    groups, out = int(sys.argv[1]), sys.argv[2]
    mix = sys.argv[3] if len(sys.argv) > 3 else "pareto"
    categories = int(sys.argv[4]) if len(sys.argv) > 4 else 0
    chunks = (groups + CHUNK - 1) // CHUNK
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(chunks)]
    writer = None
    for index, stream in enumerate(streams):
        rows = min(CHUNK, groups - index * CHUNK)
        table = chunk(stream, index * CHUNK, rows, mix, categories, out.endswith(".quoted.csv"))
        if writer is None and out.endswith(".csv"):
            writer = pacsv.CSVWriter(out, table.schema)
        elif writer is None:
            writer = pq.ParquetWriter(out, table.schema, compression="zstd")
        if out.endswith(".csv"):
            writer.write_table(table)
        else:
            writer.write_table(table, row_group_size=CHUNK)
    writer.close()


if __name__ == "__main__":
    main()
