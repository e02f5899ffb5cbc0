"""Reference fits of the normal-normal model, outside ratepool.

Two invented data sets of group estimates with known standard errors
(seeded): `normal_groups.csv` (60 clinics' mean waiting times in minutes,
standard errors from 0.3 to 6) and `normal_boundary.csv` (20 groups whose
estimates vary less than their standard errors say, so tau^2 = 0).

For each, the marginal log likelihood of y_i ~ N(mu, s_i^2 + tau^2) and the
restricted one (Harville, JASA 1977: the marginal one at mu's weighted mean,
less 1/2 ln sum 1/(s_i^2 + tau^2), plus 1/2 ln 2 pi) are written in numpy and
maximised by scipy.optimize.minimize_scalar over tau^2 (the profile in mu is
the weighted mean) to 1e-13; the standard errors of mu and tau^2 come from the
inverse of the Hessian by statsmodels.tools.numdiff.approx_hess3. The first
groups' posteriors N(B mu + (1 - B) y, (1 - B) s^2), B = s^2/(s^2 + tau^2),
their 95% intervals (scipy.stats.norm.ppf) and P(theta > 20) (norm.sf) are
written beside them.

Run from the repository root: python3 scripts/make_normal_fixtures.py
"""
import csv
import json

import numpy as np
from mpmath import mp, mpf
from scipy import optimize, stats
from statsmodels.tools.numdiff import approx_hess3

mp.dps = 40
rng = np.random.default_rng(20261202)


def write_groups(name, ids, estimates, ses):
    with open(f"tests/fixtures/{name}", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["clinic", "wait_minutes", "wait_se"])
        for i, y, s in zip(ids, estimates, ses):
            w.writerow([i, repr(float(y)), repr(float(s))])


def log_marginal(mu, tau2, y, s):
    v = s * s + tau2
    return float(np.sum(-0.5 * (np.log(2 * np.pi * v) + (y - mu) ** 2 / v)))


def weighted_mean(tau2, y, s):
    w = 1.0 / (s * s + tau2)
    return float(np.sum(w * y) / np.sum(w))


def restricted(tau2, y, s):
    mu = weighted_mean(tau2, y, s)
    v = s * s + tau2
    return log_marginal(mu, tau2, y, s) - 0.5 * np.log(np.sum(1.0 / v)) + 0.5 * np.log(2 * np.pi)


def fit(y, s, method):
    if method == "ml":
        profile = lambda t: -log_marginal(weighted_mean(t, y, s), t, y, s)
    else:
        profile = lambda t: -restricted(t, y, s)
    upper = 10 * np.var(y) + 1.0
    found = optimize.minimize_scalar(profile, bounds=(0.0, upper), method="bounded",
                                     options={"xatol": 1e-13, "maxiter": 10000})
    tau2 = float(found.x)
    # The boundary: the score at tau^2 = 0 is not positive.
    if profile(0.0) <= profile(tau2):
        tau2 = 0.0
    else:
        # Polish to the root of the profile score at 40 digits (mpmath; the
        # envelope theorem drops mu's own derivative), as a flat maximum
        # leaves tau^2 to ~1e-8 only.
        ys, ss = [mpf(repr(float(v))) for v in y], [mpf(repr(float(v))) for v in s]

        def score(t):
            v = [si * si + t for si in ss]
            mu = sum(yi / vi for yi, vi in zip(ys, v)) / sum(1 / vi for vi in v)
            value = sum((yi - mu) ** 2 / vi ** 2 - 1 / vi for yi, vi in zip(ys, v)) / 2
            if method == "reml":
                value += sum(1 / vi ** 2 for vi in v) / sum(1 / vi for vi in v) / 2
            return value
        tau2 = float(mp.findroot(score, mpf(tau2)))
    mu = weighted_mean(tau2, y, s)
    out = {"mean": mu, "variance": tau2,
           "log_marginal_likelihood": log_marginal(mu, tau2, y, s),
           "mean_se": float(1.0 / np.sqrt(np.sum(1.0 / (s * s + tau2))))}
    if method == "reml":
        out["restricted_log_likelihood"] = float(restricted(tau2, y, s))
    if tau2 > 0:
        if method == "ml":
            negative = lambda p: -log_marginal(p[0], p[1], y, s)
        else:
            # The restricted criterion jointly in (mu, tau^2): the marginal
            # one plus the mu-free restricted term.
            negative = lambda p: -(log_marginal(p[0], p[1], y, s)
                                   - 0.5 * np.log(np.sum(1.0 / (s * s + p[1]))) + 0.5 * np.log(2 * np.pi))
        cov = np.linalg.inv(approx_hess3(np.array([mu, tau2]), negative))
        out["mean_se"] = float(np.sqrt(cov[0, 0]))
        out["variance_se"] = float(np.sqrt(cov[1, 1]))
    return out


def posteriors(y, s, fitted, count=6):
    rows = []
    mu, tau2 = fitted["mean"], fitted["variance"]
    for yi, si in list(zip(y, s))[:count]:
        b = si * si / (si * si + tau2)
        mean = b * mu + (1 - b) * yi
        sd = float(np.sqrt((1 - b) * si * si))
        rows.append({"estimate": float(yi), "std_error": float(si), "pool_weight": b,
                     "posterior_mean": mean, "posterior_sd": sd,
                     "interval_lo": float(stats.norm.ppf(0.025, mean, sd)),
                     "interval_hi": float(stats.norm.ppf(0.975, mean, sd)),
                     "prob_above_20": float(stats.norm.sf(20.0, mean, sd))})
    return rows


out = {"source": "scripts/make_normal_fixtures.py (numpy log likelihoods, scipy.optimize.minimize_scalar, "
                  "statsmodels approx_hess3, scipy.stats.norm)"}

ids = [f"clinic-{i:02d}" for i in range(60)]
ses = np.round(rng.choice([0.3, 0.8, 1.5, 3.0, 6.0], size=60) * rng.uniform(0.8, 1.2, size=60), 3)
truth = rng.normal(18.0, 2.5, size=60)
estimates = np.round(rng.normal(truth, ses), 3)
write_groups("normal_groups.csv", ids, estimates, ses)
out["groups"] = {}
for method in ["ml", "reml"]:
    fitted = fit(estimates, ses, method)
    fitted["posteriors"] = posteriors(estimates, ses, fitted)
    out["groups"][method] = fitted

ids = [f"clinic-{i:02d}" for i in range(20)]
ses = np.round(rng.uniform(2.0, 4.0, size=20), 3)
estimates = np.round(rng.normal(15.0, 0.5 * ses), 3)
write_groups("normal_boundary.csv", ids, estimates, ses)
out["boundary"] = {method: fit(estimates, ses, method) for method in ["ml", "reml"]}

json.dump(out, open("tests/fixtures/normal.json", "w"), indent=1)
print(json.dumps(out, indent=1)[:3000])
