"""Synthetic beta-binomial inputs for the scale benchmarks, as Parquet.

Each group is an invented seller: a number of ratings from a heavy-tailed
(floor of 3 times a Pareto variable of tail index 1.1, less 2: at least 1,
median 3, capped at 200,000) distribution, a true
positive share from Beta(18, 2), and a binomial number of positive ratings.
Rows are made in chunks of 1M, each chunk from its own stream of a fixed seed,
so a file of N groups is the same whatever machine makes it.

usage: python3 benches/generate_binomial.py GROUPS OUT.parquet
"""
import sys

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

SEED = 20261202
CHUNK = 1_000_000


def chunk(stream: np.random.Generator, first_id: int, rows: int) -> pa.Table:
    ratings = np.minimum(np.floor(3.0 * (stream.pareto(1.1, rows) + 1.0)) - 2.0, 200_000).astype(np.int64)
    share = stream.beta(18.0, 2.0, rows)
    positive = stream.binomial(ratings, share).astype(np.int64)
    ids = np.arange(first_id, first_id + rows, dtype=np.int64)
    return pa.table({"seller_id": ids, "positive_ratings": positive, "total_ratings": ratings})


def main() -> None:
    groups, out = int(sys.argv[1]), sys.argv[2]
    chunks = (groups + CHUNK - 1) // CHUNK
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(chunks)]
    writer = None
    for index, stream in enumerate(streams):
        rows = min(CHUNK, groups - index * CHUNK)
        table = chunk(stream, index * CHUNK, rows)
        if writer is None:
            writer = pq.ParquetWriter(out, table.schema, compression="zstd")
        writer.write_table(table, row_group_size=CHUNK)
    writer.close()


if __name__ == "__main__":
    main()
