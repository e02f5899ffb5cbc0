"""Reference values for the star-rating model (Dirichlet-multinomial), made
by general-purpose libraries, not by ratepool, for tests/integration/levels.rs.

tests/fixtures/levels/fits.json: invented groups drawn from Dirichlet
  priors (numpy, fixed seed), each with
    vectors      [counts..., groups sharing them]
    shapes       the prior maximising the marginal likelihood: the sum of
                 scipy.stats.dirichlet_multinomial.logpmf over the groups,
                 maximised by scipy.optimize.minimize (BFGS on ln a, the
                 gradient from scipy.special.digamma), then Newton-polished
                 with scipy.special.polygamma
    log_likelihood  scipy's sum at those shapes

tests/fixtures/levels/mean_score.json: the mean score M = sum s_k p_k under
  Dirichlet(shapes):
    cdf          P(M <= t) by the Gil-Pelaez inversion integral on the real
                 axis, 1/2 - (1/pi) int_0^inf Im[phi(u)] / u du with
                 phi(u) = prod (1 - i (s_k - t) u)^(-shape_k), at 40 digits
                 with mpmath.quad
    quantiles    t with P(M <= t) = p, by mpmath.findroot on that CDF
    draws        P(M <= t) estimated from 10^7 Dirichlet draws (numpy), with
                 its binomial standard error

tests/fixtures/levels/demo.json: demo-data/star_sellers.csv fitted as
  above, and for three sellers the interval and P(mean score > 4.5) by
  mpmath at that prior, and P(share of one star > 0.1) by scipy.stats.beta.

Run from the repository root:  python3 scripts/make_level_fixtures.py
(or name the parts to remake: fits, mean_score, demo).
"""
import json
import os
import sys

import mpmath as mp
import numpy as np
from scipy import optimize, special, stats

OUT = "tests/fixtures/levels"
rng = np.random.default_rng(20261204)


def draw_groups(shapes, groups, mean_ratings):
    """Invented groups: ratings per group from a geometric law, shares from
    Dirichlet(shapes), counts from the multinomial; merged to distinct vectors."""
    shapes = np.asarray(shapes)
    totals = rng.geometric(1.0 / mean_ratings, size=groups) - 1
    shares = rng.dirichlet(shapes, size=groups)
    counts = np.array([rng.multinomial(n, p) for n, p in zip(totals, shares)])
    distinct, weights = np.unique(counts, axis=0, return_counts=True)
    return distinct, weights


def fit(distinct, weights):
    """scipy's log likelihood summed over the groups, maximised over ln a."""
    totals = distinct.sum(axis=1)

    def loglik(a):
        return float(np.sum(weights * stats.dirichlet_multinomial.logpmf(distinct, a, totals)))

    def negative(u):
        return -loglik(np.exp(u))

    def gradient_a(a):
        strength = a.sum()
        common = np.sum(weights * (special.digamma(strength + totals) - special.digamma(strength)))
        per_level = np.sum(weights[:, None] * (special.digamma(a + distinct) - special.digamma(a)), axis=0)
        return per_level - common

    def negative_gradient(u):
        a = np.exp(u)
        return -gradient_a(a) * a

    pooled = (weights[:, None] * distinct).sum(axis=0) / (weights * totals).sum()
    u = np.log(pooled * 5.0)
    result = optimize.minimize(negative, u, jac=negative_gradient, method="BFGS", options={"gtol": 1e-10, "maxiter": 10000})
    a = np.exp(result.x)
    # Newton polish in a, the Hessian from scipy.special.polygamma.
    for _ in range(20):
        strength = a.sum()
        common = np.sum(weights * (special.polygamma(1, strength + totals) - special.polygamma(1, strength)))
        diag = np.sum(weights[:, None] * (special.polygamma(1, a + distinct) - special.polygamma(1, a)), axis=0)
        hessian = np.diag(diag) - common
        step = np.linalg.solve(hessian, -gradient_a(a))
        a = a + step
        if np.max(np.abs(step / a)) < 1e-15:
            break
    return a, loglik(a)


def fits():
    cases = []
    for name, shapes, groups, mean_ratings in [
        ("five-stars", [0.6, 0.4, 0.9, 2.5, 6.0], 3000, 12.0),
        ("three-levels-sparse", [0.3, 1.2, 0.5], 800, 3.0),
        ("two-levels", [1.5, 4.0], 2000, 20.0),
        ("five-stars-strong", [6.0, 4.0, 9.0, 25.0, 60.0], 4000, 40.0),
    ]:
        distinct, weights = draw_groups(shapes, groups, mean_ratings)
        a, ll = fit(distinct, weights)
        cases.append(
            {
                "name": name,
                "levels": len(shapes),
                "vectors": [[int(x) for x in row] + [int(w)] for row, w in zip(distinct, weights)],
                "shapes": [float(x) for x in a],
                "log_likelihood": ll,
            }
        )
    return cases


mp.mp.dps = 40


def cdf(shapes, scores, t):
    """P(M <= t) by Gil-Pelaez on the real axis, at 40 digits."""
    shapes = [mp.mpf(b) for b in shapes]
    weights = [mp.mpf(s) - mp.mpf(t) for s in scores]
    sd = mp.sqrt(sum(b * w * w for b, w in zip(shapes, weights)))

    def integrand(u):
        phi = mp.mpf(1)
        for b, w in zip(shapes, weights):
            phi *= (1 - 1j * w * u) ** (-b)
        return mp.im(phi) / u

    scale = 1 / sd
    # Break points a half-turn of the leading phase (u E X) apart while the
    # modulus is large, so each piece of the quadrature is smooth.
    mean_x = abs(sum(b * w for b, w in zip(shapes, weights)))
    pieces = int(min(2000, max(10, 30 * scale * mean_x / mp.pi)))
    points = [30 * scale * j / pieces for j in range(pieces + 1)] + [300 * scale, 1e4 * scale, mp.inf]
    return mp.mpf(0.5) - mp.quad(integrand, points) / mp.pi


def quantile(shapes, scores, p):
    """t with P(M <= t) = p: the Illinois method in a bracket of the mean
    plus or minus 12 standard deviations (cut to the scores' range), checked to 1e-15."""
    total = sum(shapes)
    mean = sum(b * s for b, s in zip(shapes, scores)) / total
    sd = mp.sqrt(sum(b * (s - mean) ** 2 for b, s in zip(shapes, scores)) / total / (total + 1))
    lo, hi = max(min(scores) + 1e-12, mean - 12 * sd), min(max(scores) - 1e-12, mean + 12 * sd)
    t = mp.findroot(
        lambda t: cdf(shapes, scores, t) - p, (mp.mpf(lo), mp.mpf(hi)), solver="illinois", tol=mp.mpf(10) ** -36, verify=False
    )
    assert abs(cdf(shapes, scores, t) - p) < 1e-15, (shapes, p)
    return t


def mean_score():
    stars = [1, 2, 3, 4, 5]
    laws = [
        ("no ratings, weak prior", [0.6, 0.4, 0.9, 2.5, 6.0], stars),
        ("three fives", [0.6, 0.4, 0.9, 2.5, 9.0], stars),
        ("eight hundred ratings", [30.6, 20.4, 40.9, 180.5, 538.0], stars),
        ("tiny shapes", [0.05, 0.02, 0.1, 0.3, 0.2], stars),
        ("uneven scores", [2.0, 3.0, 0.7], [0.0, 0.25, 1.0]),
        ("one one-star rating", [1.5, 0.3, 0.6, 2.0, 6.6], stars),
        ("twenty thousand ratings", [1000.5, 400.3, 1200.6, 4000.0, 13406.6], stars),
        ("a million ratings", [50000.5, 0.3, 0.6, 100002.0, 850006.6], stars),
    ]
    draw_rng = np.random.default_rng(20261205)
    cdfs, quantiles = [], []
    for name, shapes, scores in laws:
        for t in [1.2, 2.5, 3.7, 4.3, 4.6, 4.9]:
            lo, hi = min(scores), max(scores)
            t = lo + (t - 1.0) / 4.0 * (hi - lo)
            cdfs.append({"law": name, "shapes": shapes, "scores": scores, "t": t, "lower": float(cdf(shapes, scores, t))})
        # And about the law's own mean, where a concentrated law has its mass.
        total = sum(shapes)
        mean = sum(b * s for b, s in zip(shapes, scores)) / total
        sd = (sum(b * (s - mean) ** 2 for b, s in zip(shapes, scores)) / total / (total + 1)) ** 0.5
        for k in [-3.0, -1.0, 0.5, 2.0]:
            t = mean + k * sd
            if min(scores) < t < max(scores):
                cdfs.append({"law": name, "shapes": shapes, "scores": scores, "t": t, "lower": float(cdf(shapes, scores, t))})
        for p in [0.025, 0.5, 0.975]:
            quantiles.append({"law": name, "shapes": shapes, "scores": scores, "p": p, "t": float(quantile(shapes, scores, p))})
    draws = []
    for name, shapes, scores in laws[:3]:
        shares = draw_rng.dirichlet(shapes, size=10_000_000)
        m = shares @ np.asarray(scores, dtype=float)
        for t in [3.9, 4.5]:
            estimate = float(np.mean(m <= t))
            draws.append(
                {
                    "law": name,
                    "shapes": shapes,
                    "scores": scores,
                    "t": t,
                    "estimate": estimate,
                    "se": float(np.sqrt(max(estimate * (1 - estimate), 1e-12) / len(m))),
                    "draws": len(m),
                }
            )
    return {"cdf": cdfs, "quantiles": quantiles, "draws": draws}


def demo():
    """The demo sellers: scipy's fit, and for three sellers the posterior mean
    score's interval and P(mean score > 4.5) by mpmath at that prior."""
    import csv

    with open("demo-data/star_sellers.csv") as f:
        rows = list(csv.DictReader(f))
    columns = [f"stars_{k}" for k in range(1, 6)]
    counts = np.array([[int(r[c]) for c in columns] for r in rows])
    distinct, weights = np.unique(counts, axis=0, return_counts=True)
    a, ll = fit(distinct, weights)
    scores = [1, 2, 3, 4, 5]
    sellers = []
    for seller in ["seller-0002", "seller-0007", "seller-0042"]:
        n = counts[[r["seller_id"] for r in rows].index(seller)]
        shapes = [float(x) for x in a + n]
        sellers.append(
            {
                "seller_id": seller,
                "posterior_mean": float(sum(b * s for b, s in zip(shapes, scores)) / sum(shapes)),
                "interval_lo": float(quantile(shapes, scores, 0.025)),
                "interval_hi": float(quantile(shapes, scores, 0.975)),
                "prob_above": float(1 - cdf(shapes, scores, 4.5)),
                # P(share of one-star ratings > 0.1): the share is Beta(b_1, B - b_1) (scipy.stats.beta).
                "prob_share_above": float(stats.beta.sf(0.1, shapes[0], sum(shapes) - shapes[0])),
            }
        )
    return {"shapes": [float(x) for x in a], "log_likelihood": ll, "sellers": sellers}


os.makedirs(OUT, exist_ok=True)
parts = sys.argv[1:] or ["fits", "mean_score", "demo"]
if "fits" in parts:
    with open(f"{OUT}/fits.json", "w") as f:
        json.dump(fits(), f, indent=1)
if "mean_score" in parts:
    with open(f"{OUT}/mean_score.json", "w") as f:
        json.dump(mean_score(), f, indent=1)
if "demo" in parts:
    with open(f"{OUT}/demo.json", "w") as f:
        json.dump(demo(), f, indent=1)
