"""The driver's share of ratepool.spark.fit, for benches/python_fit.sh: the
key table of the rows (a pyarrow group_by standing in for the cluster's), then
`ratepool.fit_pairs` on it with exceedance, flags and ranks, timed RUNS times;
prints the keys and the median.

usage: python benches/python_fit_pairs.py INPUT.parquet [RUNS]
"""
import statistics
import sys
import time

import pyarrow.parquet as pq

import ratepool

rows = pq.read_table(sys.argv[1], columns=["positive_ratings", "total_ratings"])
keys = rows.group_by(["positive_ratings", "total_ratings"]).aggregate([([], "count_all")])
seconds = []
for _ in range(int(sys.argv[2]) if len(sys.argv) > 2 else 5):
    started = time.perf_counter()
    scored = ratepool.fit_pairs(keys, weights="count_all", model="beta-binomial",
                                successes="positive_ratings", trials="total_ratings",
                                above=0.9, flag_fdr=0.1, ranks=True)
    seconds.append(time.perf_counter() - started)
assert scored.table.num_rows == keys.num_rows
print(f"fit_pairs on {keys.num_rows} keys of {rows.num_rows} rows (above, flag_fdr, ranks): "
      f"median {statistics.median(seconds):.3f} s of {len(seconds)}")
