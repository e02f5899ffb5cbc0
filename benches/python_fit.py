"""One timed Python fit for benches/python_fit.sh: reads the Parquet file
into a polars frame (not timed), then times `ratepool.fit` on the frame, the
output table read back as pyarrow included, and appends the seconds to
SECONDS_FILE.

usage: python benches/python_fit.py INPUT.parquet SECONDS_FILE
"""
import sys
import time

import polars as pl

import ratepool

frame = pl.read_parquet(sys.argv[1])
started = time.perf_counter()
result = ratepool.fit(frame, model="beta-binomial", group="seller_id", successes="positive_ratings",
                      trials="total_ratings")
seconds = time.perf_counter() - started
assert result.table.num_rows == frame.height
with open(sys.argv[2], "a") as out:
    out.write(f"{seconds:.3f}\n")
