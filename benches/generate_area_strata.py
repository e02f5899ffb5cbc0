"""Synthetic area-by-stratum rows for the standardisation benchmark: one row
per invented area and age band (five bands), with cases and population, as
Parquet.

Each area gets a population from lognormal(ln 5000, 1), split over the five
bands by Dirichlet(6, 10, 7, 4, 2) shares, a relative risk from
Gamma(8, 1/8), and Poisson cases at invented band rates times that risk.
Rows are written area by area in chunks of 1M areas, each chunk from its
own stream of a fixed seed.

usage: python3 benches/generate_area_strata.py AREAS OUT.parquet
"""
import sys

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

SEED = 20261204
CHUNK = 1_000_000
BANDS = np.array(["0-14", "15-44", "45-64", "65-79", "80+"])
RATES = np.array([0.0002, 0.0005, 0.002, 0.006, 0.012])


def main() -> None:
    areas, out = int(sys.argv[1]), sys.argv[2]
    chunks = (areas + CHUNK - 1) // CHUNK
    streams = [np.random.default_rng(s) for s in np.random.SeedSequence(SEED).spawn(chunks)]
    writer = None
    for index, stream in enumerate(streams):
        n = min(CHUNK, areas - index * CHUNK)
        size = stream.lognormal(np.log(5000.0), 1.0, n)
        shares = stream.dirichlet([6, 10, 7, 4, 2], n)
        risk = stream.gamma(8.0, 1 / 8.0, n)
        population = np.round(size[:, None] * shares).astype(np.int64)
        cases = stream.poisson(population * RATES[None, :] * risk[:, None])
        ids = np.repeat(np.arange(index * CHUNK, index * CHUNK + n), len(BANDS))
        table = pa.table({
            "area": pa.array(np.char.add("a", ids.astype(str))),
            "age_band": pa.array(np.tile(BANDS, n)),
            "cases": cases.ravel(),
            "population": population.ravel(),
        })
        if writer is None:
            writer = pq.ParquetWriter(out, table.schema)
        writer.write_table(table, row_group_size=CHUNK)
    writer.close()


if __name__ == "__main__":
    main()
