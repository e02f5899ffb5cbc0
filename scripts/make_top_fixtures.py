"""Exact probabilities of being among the K best rates, outside ratepool:
for each group, P(rate_i among the K highest) = ∫ f_i(x) P(at most K - 1 of
the others exceed x) dx, with the posterior densities and tails from
scipy.stats.beta, the count of others above x by the exact Poisson-binomial
recursion, and the integral by scipy.integrate.quad over the group's
central 1 - 1e-12 mass. Eight invented groups under a fixed Beta prior.

`tests/integration/decisions.rs` scores the groups with the same prior and
checks prob_top (joint draws) within 0.005 of these.

Run from the repository root: python3 scripts/make_top_fixtures.py
"""
import json

import numpy as np
from scipy import integrate, stats

PRIOR = (4.0, 6.0)
GROUPS = [(0, 1), (3, 5), (7, 10), (12, 30), (40, 80), (2, 2), (9, 12), (55, 100)]
K = 3


def at_most(probabilities, m):
    """P(at most m successes) for independent Bernoulli trials."""
    dist = np.zeros(len(probabilities) + 1)
    dist[0] = 1.0
    for p in probabilities:
        dist[1:] = dist[1:] * (1 - p) + dist[:-1] * p
        dist[0] *= 1 - p
    return dist[: m + 1].sum()


posteriors = [stats.beta(PRIOR[0] + k, PRIOR[1] + n - k) for k, n in GROUPS]
exact = []
for i, own in enumerate(posteriors):
    others = [p for j, p in enumerate(posteriors) if j != i]
    lo, hi = own.ppf(0.5e-12), own.isf(0.5e-12)
    integrand = lambda x: own.pdf(x) * at_most([o.sf(x) for o in others], K - 1)
    value, error = integrate.quad(integrand, lo, hi, epsabs=1e-12, epsrel=1e-10, limit=200)
    exact.append(value)
assert abs(sum(exact) - K) < 1e-8, sum(exact)
with open("tests/fixtures/top.json", "w") as out:
    json.dump({"source": "scripts/make_top_fixtures.py (scipy.stats.beta, scipy.integrate.quad)",
               "prior": PRIOR, "k": K, "groups": GROUPS, "prob_top": exact}, out, indent=1)
print([round(e, 4) for e in exact], sum(exact))
