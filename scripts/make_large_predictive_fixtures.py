"""Beta-binomial prior predictive CDFs at n from 1e5 to 1e6, outside
ratepool, for the regime where ratepool sums at most 20,000 terms each side
of k and takes the far tail as continuous (tests/integration/reference.rs).

Every term is computed in mpmath at 30 digits: p(0) = B(a, n + b) / B(a, b)
from mpmath.beta, then p(j + 1) = p(j) (n - j)(j + a) / ((j + 1)(n - j - 1 + b))
(the ratio of neighbouring beta-binomial terms, a handbook identity), summed
in order, so P(K <= k) carries about 25 correct digits at every k; the sum
over all n + 1 terms is checked to be 1 within 1e-20. Counts at the
distribution's quantiles 1e-9, 0.01, 0.3, 0.5, 0.9 and 0.999.

Run from the repository root (about a minute):
    python3 scripts/make_large_predictive_fixtures.py
"""
import json

import mpmath

mpmath.mp.dps = 30
QUANTILES = [1e-9, 0.01, 0.3, 0.5, 0.9, 0.999]
rows = []
for n in [100_000, 1_000_000]:
    for a, b in [(0.3, 0.7), (2.0, 5.0), (18.0, 2.0), (500.0, 1500.0), (5e4, 5e4)]:
        a_, b_ = mpmath.mpf(a), mpmath.mpf(b)
        term = mpmath.beta(a_, n + b_) / mpmath.beta(a_, b_)
        cumulative, below = [], mpmath.mpf(0)
        for j in range(n + 1):
            below += term
            cumulative.append(below)
            if j < n:
                term = term * (n - j) * (j + a_) / ((j + 1) * (n - j - 1 + b_))
        assert abs(cumulative[-1] - 1) < mpmath.mpf("1e-20"), (n, a, b, cumulative[-1])
        counts = {0, n}
        for q in QUANTILES:
            counts.add(next(k for k, c in enumerate(cumulative) if c >= q))
        for k in sorted(counts):
            rows.append({"model": "beta-binomial", "size": n, "count": k, "first": a, "second": b,
                         "below": float(cumulative[k - 1]) if k > 0 else 0.0, "at_most": float(cumulative[k])})
        print(n, a, b, len(rows), flush=True)
json.dump({"source": "mpmath at 30 digits (scripts/make_large_predictive_fixtures.py)", "rows": rows},
          open("tests/fixtures/predictive_cdf_large.json", "w"), indent=0)
