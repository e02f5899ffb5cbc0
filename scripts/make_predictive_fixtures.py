"""Prior predictive CDFs for the calibration check, outside ratepool:
scipy.stats.betabinom.cdf (beta-binomial) and scipy.stats.nbinom.cdf
(the gamma-Poisson marginal: n = shape, p = rate / (rate + exposure)) at
counts across each distribution, shapes from 0.3 to 500 and sizes from 1 to
20,000. `tests/integration/reference.rs` checks (P(K < k), P(K <= k)) within
1e-10 absolute.

Run from the repository root: python3 scripts/make_predictive_fixtures.py
"""
import json

import numpy as np
from scipy import stats

rows = []
for n in [1, 7, 40, 300, 5000, 20000]:
    for a, b in [(0.3, 0.7), (2.0, 5.0), (18.0, 2.0), (500.0, 1500.0)]:
        dist = stats.betabinom(n, a, b)
        for k in sorted({0, n, *np.unique(dist.ppf([1e-9, 0.01, 0.3, 0.5, 0.9, 0.999]).astype(int))}):
            rows.append({"model": "beta-binomial", "size": n, "count": int(k), "first": a, "second": b,
                         "below": float(dist.cdf(k - 1)), "at_most": float(dist.cdf(k))})
for exposure in [0.01, 1.0, 35.5, 2000.0]:
    for shape, rate in [(0.4, 0.5), (6.0, 6.0), (300.0, 20.0)]:
        dist = stats.nbinom(shape, rate / (rate + exposure))
        for y in sorted({0, *np.unique(dist.ppf([1e-9, 0.01, 0.5, 0.99, 0.999999]).astype(int))}):
            rows.append({"model": "gamma-poisson", "size": exposure, "count": int(y), "first": shape,
                         "second": rate, "below": float(dist.cdf(y - 1)), "at_most": float(dist.cdf(y))})
json.dump({"source": "scipy.stats betabinom.cdf and nbinom.cdf", "rows": rows},
          open("tests/fixtures/predictive_cdf.json", "w"), indent=0)
print(len(rows))
