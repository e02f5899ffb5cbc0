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
