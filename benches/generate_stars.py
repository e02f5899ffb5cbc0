"""Synthetic star-rating inputs for benches/star_ratings.sh, as Parquet.

Each group is an invented seller with a number of ratings, lognormal with
median 12 and log-sd 1.4 (rounded, capped at 20,000), true shares of 1 to 5
stars from Dirichlet(0.5, 0.3, 0.6, 2.0, 6.6), and multinomial counts
`stars_1` ... `stars_5`. The same rows also carry `positive` (4 and 5 stars)
and `total`, so the beta-binomial model can run on the same sellers.
Rows are made in chunks of 1M, each from its own stream of a fixed seed, so
a file of N sellers is the same whatever machine makes it.

usage: python3 benches/generate_stars.py SELLERS OUT.parquet
"""
import sys

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

SEED = 20261210
CHUNK = 1_000_000
SHAPES = [0.5, 0.3, 0.6, 2.0, 6.6]


def chunk(stream: np.random.Generator, first_id: int, rows: int) -> pa.Table:
    ratings = np.minimum(20_000, np.round(stream.lognormal(np.log(12.0), 1.4, rows))).astype(np.int64)
    shares = stream.dirichlet(SHAPES, rows)
    stars = stream.multinomial(ratings, shares)
    columns = {"seller_id": np.arange(first_id, first_id + rows, dtype=np.int64)}
    for k in range(5):
        columns[f"stars_{k + 1}"] = stars[:, k].astype(np.int64)
    columns["positive"] = (stars[:, 3] + stars[:, 4]).astype(np.int64)
    columns["total"] = ratings
    return pa.table(columns)


def main() -> None:
    sellers, out = int(sys.argv[1]), sys.argv[2]
    chunks = (sellers + CHUNK - 1) // CHUNK
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(chunks)]
    writer = None
    for index, stream in enumerate(streams):
        rows = min(CHUNK, sellers - index * CHUNK)
        table = chunk(stream, index * CHUNK + 1, rows)
        writer = writer or pq.ParquetWriter(out, table.schema)
        writer.write_table(table)
    writer.close()


if __name__ == "__main__":
    main()
