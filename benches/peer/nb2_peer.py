"""The yardstick for covariates: the same job as `ratepool fit --model
gamma-poisson --covariates ...`, written the way an analyst would with
statsmodels, on every row (numeric covariates make nearly every group
distinct, so there is nothing to compress).

1. read the Parquet input with pyarrow into pandas;
2. the design: intercept, deprivation, outdoor_share, the log of density,
   and indicators of region (the first level in sorted order the reference);
3. negative binomial (NB2) regression with offset log(expected):
   `statsmodels.discrete.discrete_model.NegativeBinomial(y, X,
   exposure=expected, loglike_method='nb2')`, fitted by Newton's method;
4. each area's prior centre mu = exp(x'b) and the conjugate posterior
   Gamma(r + y, r/mu + E), r = 1/alpha: its mean, sd and 95% interval
   (scipy.stats.gamma.ppf);
5. write the columns with pyarrow (Parquet, zstd).

usage: python3 benches/peer/nb2_peer.py IN.parquet OUT.parquet
"""
import sys
import time

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from scipy import stats
from statsmodels.discrete.discrete_model import NegativeBinomial

start = time.perf_counter()
frame = pq.read_table(sys.argv[1]).to_pandas()
levels = sorted(frame["region"].unique())
X = np.column_stack(
    [np.ones(len(frame)), frame["deprivation"], frame["outdoor_share"], np.log(frame["density"])]
    + [(frame["region"] == level).to_numpy(float) for level in levels[1:]]
)
y, exposure = frame["cases"].to_numpy(float), frame["expected"].to_numpy(float)
result = NegativeBinomial(y, X, exposure=exposure, loglike_method="nb2").fit(method="newton", maxiter=100, disp=0)
b, alpha = result.params[:-1], result.params[-1]
r = 1.0 / alpha
mu = np.exp(X @ b)
shape, rate = r + y, r / mu + exposure
table = pa.table(
    {
        "area_id": pa.array(frame["area_id"]),
        "prior_mean": mu,
        "posterior_mean": shape / rate,
        "posterior_sd": np.sqrt(shape) / rate,
        "interval_lo": stats.gamma.ppf(0.025, shape, scale=1.0 / rate),
        "interval_hi": stats.gamma.ppf(0.975, shape, scale=1.0 / rate),
    }
)
pq.write_table(table, sys.argv[2], compression="zstd")
print(f"newton iterations {result.mle_retvals.get('iterations')}, {time.perf_counter() - start:.2f} s", file=sys.stderr)
