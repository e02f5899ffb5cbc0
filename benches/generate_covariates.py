"""Synthetic areas with covariates for benches/covariates.sh (seeded).

N areas, each with an expected count (exposure) drawn log-normal around 40,
three numeric covariates (deprivation ~ N(0, 1); outdoor_share ~ U(0, 0.6);
density, log-normal) and a five-level text column `region`, its ids text
("a000000001"). Each area's relative risk is exp(x'b) times a Gamma(8, 8)
draw (overdispersion beyond the covariates), and its case count is Poisson
of expected times risk. Written as Parquet (pyarrow) or CSV by the extension.

usage: python3 benches/generate_covariates.py N OUT.(parquet|csv)
"""
import sys

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

n, out = int(sys.argv[1]), sys.argv[2]
rng = np.random.default_rng(20261204)
expected = np.exp(rng.normal(np.log(40.0), 0.8, n))
deprivation = rng.normal(0.0, 1.0, n)
outdoor = rng.uniform(0.0, 0.6, n)
density = np.exp(rng.normal(5.0, 1.2, n))
region_index = rng.integers(0, 5, n)
regions = np.array(["north", "south", "east", "west", "centre"])
effect = np.array([0.0, 0.15, -0.1, 0.05, 0.25])
eta = -0.2 + 0.3 * deprivation + 0.8 * outdoor - 0.05 * np.log(density) + effect[region_index]
risk = np.exp(eta) * rng.gamma(8.0, 1.0 / 8.0, n)
cases = rng.poisson(expected * risk)
table = pa.table(
    {
        "area_id": pa.array([f"a{i:09d}" for i in range(n)]),
        "cases": pa.array(cases, pa.int64()),
        "expected": pa.array(np.round(expected, 3)),
        "deprivation": pa.array(np.round(deprivation, 4)),
        "outdoor_share": pa.array(np.round(outdoor, 4)),
        "density": pa.array(np.round(density, 1)),
        "region": pa.array(regions[region_index]),
    }
)
if out.endswith(".csv"):
    pacsv.write_csv(table, out)
else:
    pq.write_table(table, out)
