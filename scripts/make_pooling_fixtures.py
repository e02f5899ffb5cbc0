"""The likelihood-ratio test against complete pooling, outside ratepool, for
the two fit fixtures: the pooled log likelihood from scipy.stats (binom and
poisson logpmf at the pooled rate), the fitted one from tests/fixtures/
fits.json (scipy's and statsmodels' maxima), the statistic 2 (fitted -
pooled) and its p-value from the 50:50 mixture of chi-square(0) and
chi-square(1) (Self and Liang, JASA 1987): scipy.stats.chi2.sf(x, 1) / 2.

Run from the repository root: python3 scripts/make_pooling_fixtures.py
"""
import csv
import json

import numpy as np
from scipy import stats

fits = json.load(open("tests/fixtures/fits.json"))


def columns(name, *keys):
    rows = list(csv.DictReader(open(f"tests/fixtures/{name}")))
    return [np.array([float(r[k]) for r in rows]) for k in keys]


out = {"source": "scripts/make_pooling_fixtures.py (scipy.stats binom, poisson, chi2)"}
k, n = columns("beta_binomial_groups.csv", "hits", "tries")
pooled = stats.binom.logpmf(k, n, k.sum() / n.sum()).sum()
fitted = fits["beta_binomial"]["log_marginal_likelihood"]
out["beta_binomial"] = {"pooled_log_likelihood": pooled, "statistic": 2 * (fitted - pooled),
                        "p_value": stats.chi2.sf(2 * (fitted - pooled), 1) / 2}
y, e = columns("gamma_poisson_areas.csv", "cases", "expected")
pooled = stats.poisson.logpmf(y, e * y.sum() / e.sum()).sum()
fitted = fits["gamma_poisson"]["log_marginal_likelihood"]
out["gamma_poisson"] = {"pooled_log_likelihood": pooled, "statistic": 2 * (fitted - pooled),
                        "p_value": stats.chi2.sf(2 * (fitted - pooled), 1) / 2}
json.dump(out, open("tests/fixtures/pooling.json", "w"), indent=1)
print(out)

# A case with an ordinary p-value (the two above are far in the tail): 80
# invented groups of 30 trials whose rates vary a little, Beta(18, 42)
# (seed 20261204), fitted here by scipy's maximisers (Nelder-Mead from three
# starts, polished by BFGS) of the beta-binomial marginal likelihood, not by
# ratepool.
from scipy import optimize

rng = np.random.default_rng(20261204)
n = np.full(80, 30)
k = rng.binomial(n, rng.beta(18, 42, size=80))
with open("tests/fixtures/mild_overdispersion.csv", "w") as f:
    f.write("unit,hits,tries\n")
    for i, (ki, ni) in enumerate(zip(k, n)):
        f.write(f"u{i:02d},{ki},{ni}\n")


def negative(log_params):
    a, b = np.exp(log_params)
    return -stats.betabinom.logpmf(k, n, a, b).sum()


best = min((optimize.minimize(negative, start, method="Nelder-Mead",
                              options={"xatol": 1e-12, "fatol": 1e-13, "maxiter": 20000})
            for start in ([np.log(18), np.log(42)], [np.log(3), np.log(7)], [np.log(300), np.log(700)])),
           key=lambda r: r.fun)
best = optimize.minimize(negative, best.x, method="BFGS", options={"gtol": 1e-10})
fitted = -best.fun
pooled = stats.binom.logpmf(k, n, k.sum() / n.sum()).sum()
statistic = max(2 * (fitted - pooled), 0.0)
out["mild_overdispersion"] = {"log_marginal_likelihood": fitted, "pooled_log_likelihood": pooled,
                              "statistic": statistic, "p_value": stats.chi2.sf(statistic, 1) / 2,
                              "alpha": float(np.exp(best.x[0])), "beta": float(np.exp(best.x[1]))}
json.dump(out, open("tests/fixtures/pooling.json", "w"), indent=1)
print(out["mild_overdispersion"])
