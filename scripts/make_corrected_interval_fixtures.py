"""Corrected intervals as users get them, computed outside ratepool for all
three models, for tests/integration/fits.rs.

For each model the script runs `ratepool fit --intervals corrected` once on
a committed input, keeps the summary it wrote (the fitted prior, the
covariance of its working coordinates and the bootstrap bias, all as saved)
in tests/fixtures/corrected/<model>-prior.json, and then, from that summary
alone, computes every group's corrected posterior with numpy and scipy:

  * the working coordinates u of the prior (beta-binomial: logit mean, log
    strength a + b; gamma-Poisson: log mean a / b, log shape a;
    normal-normal: the mean, log precision 1 / tau^2), less the saved bias;
  * the 7 x 7 Gauss-Hermite rule of numpy's hermegauss(7), weights divided
    by their sum, on N(u, Cov) through the lower Cholesky factor of Cov;
  * each node's strength (a + b, or the rate b) held within 1e-3 to 1e12 for
    the Beta and Gamma models, as the README states; none for the normal;
  * each group's posterior under each node (scipy.stats beta, gamma, norm:
    the conjugate updates), mixed with the node weights: the mixture's mean
    and sd, its 2.5% and 97.5% points by scipy.optimize.brentq on the
    mixture CDF (xtol 1e-16, rtol 1e-15), and its P(rate > T) at T = the
    prior mean as the weighted sum of the components' sf.

The test scores the same input with `ratepool score --prior <model>-prior.json
--intervals corrected --above T` and asks for every interval end within 1e-8
(relative to max(1, |end|)), sd within 1e-10 and P(rate > T) within 1e-12.

usage (from the repository root, after `cargo build --release`):
    python3 scripts/make_corrected_interval_fixtures.py [path/to/ratepool]
"""
import csv
import json
import subprocess
import sys

import numpy as np
from scipy import optimize, stats
from scipy.special import expit

RATEPOOL = sys.argv[1] if len(sys.argv) > 1 else "target/release/ratepool"
OUT = "tests/fixtures/corrected"
CASES = {
    "beta-binomial": ("tests/fixtures/beta_binomial_groups.csv", ["unit", "hits", "tries"], ["--successes", "--trials"]),
    "gamma-poisson": ("tests/fixtures/gamma_poisson_areas.csv", ["area", "cases", "expected"], ["--events", "--exposure"]),
    "normal-normal": ("demo-data/clinic_waits.csv", ["clinic_id", "mean_wait_minutes", "wait_se"], ["--estimate", "--std-error"]),
}
TAIL = 0.025
X, W = np.polynomial.hermite_e.hermegauss(7)
W = W / W.sum()


def working(model, prior):
    if model == "beta-binomial":
        a, b = prior["alpha"], prior["beta"]
        return np.array([np.log(a / b), np.log(a + b)])
    if model == "gamma-poisson":
        a, b = prior["shape"], prior["rate"]
        return np.array([np.log(a / b), np.log(a)])
    return np.array([prior["mean"], -np.log(prior["variance"])])


def node_natural(model, u):
    """The node's natural parameters, its strength held as ratepool holds it."""
    if model == "beta-binomial":
        mean, strength = expit(u[0]), np.exp(u[1])
        strength = min(max(strength, 1e-3), 1e12)
        return mean * strength, (1 - mean) * strength
    if model == "gamma-poisson":
        mean, rate = np.exp(u[0]), np.exp(u[1] - u[0])
        rate = min(max(rate, 1e-3), 1e12)
        return mean * rate, rate
    return u[0], np.exp(-u[1])


def component(model, natural, count, size):
    if model == "beta-binomial":
        a, b = natural
        return stats.beta(a + count, b + size - count)
    if model == "gamma-poisson":
        a, b = natural
        return stats.gamma(a + count, scale=1.0 / (b + size))
    mean, tau2 = natural
    pool = size ** 2 / (size ** 2 + tau2)
    return stats.norm(pool * mean + (1 - pool) * count, np.sqrt((1 - pool) * size ** 2))


def solve(cdf, target, low, high):
    # The bracket holds the point: the CDF is 0 at a boundary of the rates, and by Chebyshev's
    # inequality at most 1/64 of the mass lies beyond eight standard deviations.
    return optimize.brentq(lambda x: cdf(x) - target, low, high, xtol=1e-16, rtol=1e-15, maxiter=500)


def main():
    for model, (path, (group, count_col, size_col), options) in CASES.items():
        summary_path = f"{OUT}/{model}-prior.json"
        subprocess.run(
            [RATEPOOL, "--quiet", "fit", "--model", model, "--input", path, "--group", group,
             options[0], count_col, options[1], size_col, "--intervals", "corrected",
             "--output", "/tmp/corrected-fixture.csv", "--summary", summary_path],
            check=True,
        )
        summary = json.load(open(summary_path))
        prior, fit = summary["prior"], summary["fit"]
        u = working(model, prior) - np.array(fit["working_bias"])
        chol = np.linalg.cholesky(np.array(fit["working_covariance"]))
        nodes = [(wx * wy, node_natural(model, u + chol @ np.array([x, y])))
                 for x, wx in zip(X, W) for y, wy in zip(X, W)]
        threshold = prior["mean"]
        rows = list(csv.DictReader(open(path)))
        result = {"model": model, "input": path, "prior": summary_path, "threshold": threshold,
                  "mean": [], "sd": [], "lower": [], "upper": [], "prob_above": []}
        for row in rows:
            c, s = float(row[count_col]), float(row[size_col])
            comps = [(w, component(model, nat, c, s)) for w, nat in nodes]
            mean = sum(w * d.mean() for w, d in comps)
            second = sum(w * (d.var() + d.mean() ** 2) for w, d in comps)
            sd = np.sqrt(max(second - mean ** 2, 0.0))
            cdf = lambda x: sum(w * d.cdf(x) for w, d in comps)
            low, high = mean - 8 * sd - 1e-12, mean + 8 * sd + 1e-12
            if model != "normal-normal":
                low = max(low, 0.0)
            if model == "beta-binomial":
                high = min(high, 1.0)
            result["mean"].append(mean)
            result["sd"].append(sd)
            result["lower"].append(solve(cdf, TAIL, low, high))
            result["upper"].append(solve(cdf, 1 - TAIL, low, high))
            result["prob_above"].append(sum(w * d.sf(threshold) for w, d in comps))
        json.dump(result, open(f"{OUT}/{model}.json", "w"), indent=0)
        print(model, len(rows), "groups; bias", fit["working_bias"])


main()
