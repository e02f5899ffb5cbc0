"""The free prior (masses on a grid maximising the marginal likelihood),
solved by a general-purpose convex solver (cvxpy with its default conic
solver), not by ratepool, for tests/integration/free_prior.rs.

free_prior/<model>.json, for beta-binomial, gamma-Poisson and normal-normal:
  pairs          [size, count, weight] of invented groups from two humps
  grid, spacing  the grid by the rule the README states, computed here (300
                 points on the family's noise-stabilising scale)
  log_marginal_likelihood   sum of weight x ln sum_j mass_j pmf(pair | rate_j),
                 the pmfs from scipy.stats
  masses         the solver's masses
  posterior_means  per pair: sum_j rate_j mass_j pmf_j / sum_j mass_j pmf_j

Fixed seed; invented data. Run from the repository root:
    python3 scripts/make_free_prior_fixtures.py
"""
import json

import cvxpy as cp
import numpy as np
from scipy import stats

OUT = "tests/fixtures/free_prior"
POINTS = 300
rng = np.random.default_rng(20261205)


def grid(raws, sizes, weights, rates):
    """The README's rule: evenly on the scale where a group's noise is the same
    at every rate (arcsine square root for proportions, square root for rates,
    the value for estimates), from the smallest raw value to the largest; a raw
    0 (1) stands as min(half the smallest positive, 1 / (2 max size)); 300
    points, or more (to 2000) where the 1% of groups with the least noise need
    points closer than their noise (1 / (2 sqrt(size)) on those scales, the
    standard error itself for estimates)."""
    lo, hi = raws.min(), raws.max()
    floor = 0.5 / max(sizes.max(), 1.0)
    spacing = {"proportion": "arcsine-root", "non-negative": "square-root", "real": "linear"}[rates]
    if rates != "real" and lo <= 0:
        lo = min(0.5 * raws[raws > 0].min(), floor)
    if rates == "proportion" and hi >= 1:
        hi = 1 - min(0.5 * (1 - raws[raws < 1].max()), floor)
    to, back = {"linear": (lambda x: x, lambda t: t),
                "square-root": (np.sqrt, np.square),
                "arcsine-root": (lambda x: np.arcsin(np.sqrt(x)), lambda t: np.sin(t) ** 2)}[spacing]
    noise = sizes if spacing == "linear" else 0.5 / np.sqrt(sizes)
    order = np.argsort(noise, kind="stable")
    cumulative = np.cumsum(weights[order])
    quietest = noise[order][np.searchsorted(cumulative, 0.01 * weights.sum())]
    points = int(min(max(np.ceil((to(hi) - to(lo)) / quietest), POINTS), 2000))
    g = back(np.linspace(to(lo), to(hi), points))
    g[0], g[-1] = lo, hi
    return g, spacing


def solve(log_l, weights):
    """max sum_i w_i ln sum_j L_ij f_j over f >= 0, sum f = 1."""
    top = log_l.max(axis=1, keepdims=True)
    scaled = np.exp(log_l - top)
    f = cp.Variable(scaled.shape[1], nonneg=True)
    # Weights scaled to sum to 1: the solver's tolerances are absolute.
    share = weights / weights.sum()
    problem = cp.Problem(cp.Maximize(share @ cp.log(scaled @ f)), [cp.sum(f) == 1])
    problem.solve(tol_gap_abs=1e-12, tol_gap_rel=1e-12, tol_feas=1e-12)
    assert problem.status == "optimal", problem.status
    masses = np.clip(f.value, 0, None)
    masses /= masses.sum()
    return masses, top[:, 0]


def write(name, pairs, log_l, g, spacing):
    weights = np.array([p[2] for p in pairs], dtype=float)
    masses, top = solve(log_l, weights)
    joint = masses * np.exp(log_l - top[:, None])
    loglik = float(weights @ (top + np.log(joint.sum(axis=1))))
    means = (joint * g).sum(axis=1) / joint.sum(axis=1)
    with open(f"{OUT}/{name}.json", "w") as out:
        json.dump({"pairs": pairs, "grid": list(g), "spacing": spacing, "masses": list(masses),
                   "log_marginal_likelihood": loglik, "posterior_means": list(means)}, out, indent=1)
    print(name, spacing, "loglik", loglik, "support", int((masses > 1e-6).sum()))


def counted(rows):
    keys, weights = np.unique(np.array(rows), axis=0, return_counts=True)
    return [[float(s), float(c), float(w)] for (s, c), w in zip(keys, weights)]


# Beta-binomial: 70% of groups near 0.25, 30% near 0.05; 5 to 200 trials.
groups = 600
rate = np.where(rng.random(groups) < 0.7, rng.beta(50, 150, groups), rng.beta(10, 190, groups))
trials = rng.integers(5, 201, groups)
pairs = counted(np.column_stack([trials, rng.binomial(trials, rate)]))
sizes, counts, weights = (np.array([p[i] for p in pairs]) for i in range(3))
g, spacing = grid(counts / sizes, sizes, weights, "proportion")
write("beta-binomial", pairs, stats.binom.logpmf(counts[:, None], sizes[:, None], g[None, :]), g, spacing)

# Gamma-Poisson: rates near 0.2 and near 2 per unit; exposures 0.5 to 60.
rate = np.where(rng.random(groups) < 0.6, rng.gamma(30, 0.2 / 30, groups), rng.gamma(20, 2.0 / 20, groups))
exposure = np.round(rng.uniform(0.5, 60, groups), 1)
pairs = counted(np.column_stack([exposure, rng.poisson(exposure * rate)]))
sizes, counts, weights = (np.array([p[i] for p in pairs]) for i in range(3))
g, spacing = grid(counts / sizes, sizes, weights, "non-negative")
write("gamma-poisson", pairs, stats.poisson.logpmf(counts[:, None], sizes[:, None] * g[None, :]), g, spacing)

# Normal-normal: means near -1 and near 1.5; standard errors 0.1 to 1.
groups = 300
theta = np.where(rng.random(groups) < 0.5, rng.normal(-1, 0.2, groups), rng.normal(1.5, 0.3, groups))
se = np.round(rng.uniform(0.1, 1.0, groups), 3)
pairs = counted(np.column_stack([se, np.round(theta + se * rng.standard_normal(groups), 4)]))
sizes, counts, weights = (np.array([p[i] for p in pairs]) for i in range(3))
g, spacing = grid(counts, sizes, weights, "real")
write("normal-normal", pairs, stats.norm.logpdf(counts[:, None], g[None, :], sizes[:, None]), g, spacing)
