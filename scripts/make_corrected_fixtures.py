"""Corrected intervals (Kass and Steffey, JASA 1989, first order) computed
outside ratepool for the beta-binomial fit fixture: the fitted prior from
tests/fixtures/fits.json (scipy's maximiser), the covariance of the working
coordinates (logit mean, log strength) as the inverse of the numerical
Hessian of the summed scipy.stats.betabinom.logpmf (central differences),
each group's posterior-mean gradient by central differences, the corrected
variance v + g' Cov g, and the interval of the Beta matched to the posterior
mean and that variance by scipy.stats.beta.ppf.

`tests/integration/fits.rs` compares ratepool's `--intervals corrected`
within 1e-5 relative (the finite differences bound the agreement).

Run from the repository root: python3 scripts/make_corrected_fixtures.py
"""
import csv
import json

import numpy as np
from scipy import stats
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


def post_mean(u):
    a, b = natural(u)
    return (a + k) / (a + b + n)


grad = np.array([(post_mean(u0 + np.eye(2)[i] * 1e-6) - post_mean(u0 - np.eye(2)[i] * 1e-6)) / 2e-6 for i in range(2)])
a, b = a0 + k, b0 + n - k
mean = a / (a + b)
variance = mean * (1 - mean) / (a + b + 1) + np.einsum("ig,ij,jg->g", grad, cov, grad)
strength = mean * (1 - mean) / variance - 1
lower = stats.beta.ppf(0.025, mean * strength, (1 - mean) * strength)
upper = stats.beta.isf(0.025, mean * strength, (1 - mean) * strength)
json.dump({"source": "scripts/make_corrected_fixtures.py (scipy betabinom, numerical Hessian, beta.ppf)",
           "covariance": cov.tolist(), "sd": np.sqrt(variance).tolist(), "lower": lower.tolist(),
           "upper": upper.tolist()}, open("tests/fixtures/corrected.json", "w"))
print(cov, lower[:3], upper[:3])
