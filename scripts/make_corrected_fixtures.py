"""Corrected intervals computed outside ratepool for the beta-binomial fit
fixture: the posterior with the fitted prior's estimation uncertainty
integrated out (the target of Kass and Steffey, JASA 1989), over the normal
approximation N(u, Cov) to the working coordinates (logit mean, log
strength). The fitted prior is tests/fixtures/fits.json's (scipy's
maximiser); Cov is the inverse of the numerical Hessian of the summed
scipy.stats.betabinom.logpmf (central differences); the integral is the
7 x 7 Gauss-Hermite rule of numpy's hermegauss; each group's mixture of
scipy.stats.beta posteriors gives its mean and sd, its interval ends by
scipy.optimize.brentq on the mixture CDF, and its P(rate > T) at the prior
mean T by the weighted sum of the components' sf.

`tests/integration/fits.rs` compares ratepool's `--intervals corrected`
within 1e-4 relative (the numerical Hessian bounds the agreement).

Run from the repository root: python3 scripts/make_corrected_fixtures.py
"""
import csv
import json

import numpy as np
from scipy import optimize, stats
from scipy.special import expit

fits = json.load(open("tests/fixtures/fits.json"))["beta_binomial"]
rows = list(csv.DictReader(open("tests/fixtures/beta_binomial_groups.csv")))
k = np.array([float(r["hits"]) for r in rows])
n = np.array([float(r["tries"]) for r in rows])
a0, b0 = fits["alpha"], fits["beta"]
u0 = np.array([np.log(a0 / b0), np.log(a0 + b0)])


def natural(u):
    mean, strength = expit(u[0]), np.exp(u[1])
    return mean * strength, (1 - mean) * strength


def loglik(u):
    a, b = natural(u)
    return stats.betabinom.logpmf(k, n, a, b).sum()


h = 1e-4
hessian = np.zeros((2, 2))
for i in range(2):
    for j in range(2):
        ei, ej = np.eye(2)[i] * h, np.eye(2)[j] * h
        hessian[i, j] = (loglik(u0 + ei + ej) - loglik(u0 + ei - ej) - loglik(u0 - ei + ej) + loglik(u0 - ei - ej)) / (4 * h * h)
cov = np.linalg.inv(-hessian)


x, w = np.polynomial.hermite_e.hermegauss(7)
w = w / w.sum()
chol = np.linalg.cholesky(cov)
nodes = [(wi * wj, natural(u0 + chol @ np.array([xi, xj]))) for xi, wi in zip(x, w) for xj, wj in zip(x, w)]
threshold = a0 / (a0 + b0)
sd, lower, upper, above = [], [], [], []
for ki, ni in zip(k, n):
    comps = [(weight, stats.beta(a + ki, b + ni - ki)) for weight, (a, b) in nodes]
    mean = sum(weight * c.mean() for weight, c in comps)
    second = sum(weight * (c.var() + c.mean() ** 2) for weight, c in comps)
    sd.append(np.sqrt(second - mean ** 2))
    cdf = lambda t: sum(weight * c.cdf(t) for weight, c in comps)
    lower.append(optimize.brentq(lambda t: cdf(t) - 0.025, 1e-15, 1 - 1e-15, xtol=1e-15, rtol=1e-14))
    upper.append(optimize.brentq(lambda t: cdf(t) - 0.975, 1e-15, 1 - 1e-15, xtol=1e-15, rtol=1e-14))
    above.append(sum(weight * c.sf(threshold) for weight, c in comps))
json.dump({"source": "scripts/make_corrected_fixtures.py (scipy betabinom, numerical Hessian, Gauss-Hermite, brentq)",
           "covariance": cov.tolist(), "sd": sd, "lower": lower, "upper": upper,
           "threshold": threshold, "prob_above": above},
          open("tests/fixtures/corrected.json", "w"))
print(cov, lower[:3], upper[:3])
