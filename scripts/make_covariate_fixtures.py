"""Reference fits of priors with covariates, outside ratepool.

Open data shipped by registry packages:

- `sids_counties.csv`: the North Carolina SIDS data (100 counties, 1974-78)
  as libpysal ships it (examples/sids2): deaths SID74 over births BIR74, with
  the share of non-white births NWBIR74/BIR74 and a three-level text column of
  our own, the county's births in tertiles ("small", "medium", "large").
  Gamma-Poisson with covariates is negative binomial (NB2) regression with
  offset ln births: checked against statsmodels'
  `NegativeBinomial(y, X, exposure=births, loglike_method='nb2')`
  (coefficients, alpha = 1/shape, log likelihood, standard errors).
- `star98_districts.csv`: statsmodels' star98 data (303 California school
  districts): NABOVE of NABOVE + NBELOW pupils above the national median in
  maths, with LOWINC and PERMINTE. Beta-binomial with covariates
  (logit mean = x'b, common strength m) is checked against scipy: the summed
  `scipy.stats.betabinom.logpmf` maximised by `scipy.optimize.minimize`
  (BFGS with the handbook digamma gradient, then Newton steps on it), standard
  errors from the inverse of statsmodels' numerical Hessian.
- `star98_logits.csv`: the same districts as estimates with standard errors
  (the logit of the share above the median, SE sqrt(1/NABOVE + 1/NBELOW), the
  delta method), for the normal model theta_i ~ N(x_i'b, tau^2) by ML and by
  REML (Harville, JASA 1977): the profile likelihood in tau^2 (b the weighted
  least-squares fit at each tau^2) maximised by scipy.optimize.minimize_scalar;
  standard errors from the inverse of statsmodels' numerical Hessian of the
  (restricted) log likelihood in (b, ln tau^2), the observed information.

Run from the repository root: python3 scripts/make_covariate_fixtures.py
"""
import csv
import json

import libpysal
import numpy as np
import statsmodels.api as sm
from scipy import optimize, special, stats
from statsmodels.discrete.discrete_model import NegativeBinomial
from statsmodels.tools.numdiff import approx_hess3

OUT = "tests/fixtures/covariates"


def write(name, header, rows):
    with open(f"{OUT}/{name}", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(header)
        for row in rows:
            w.writerow([repr(float(v)) if isinstance(v, float) else v for v in row])


def sids():
    db = libpysal.io.open(libpysal.examples.get_path("sids2.dbf"))
    names = db.header
    rows = [dict(zip(names, r)) for r in db]
    births = np.array([r["BIR74"] for r in rows])
    deaths = np.array([r["SID74"] for r in rows])
    share = np.array([r["NWBIR74"] / r["BIR74"] for r in rows])
    cuts = np.quantile(births, [1 / 3, 2 / 3])
    band = np.where(births <= cuts[0], "small", np.where(births <= cuts[1], "medium", "large"))
    write(
        "sids_counties.csv",
        ["county", "sids", "births", "nonwhite_share", "birth_band"],
        [(r["NAME"], int(d), int(b), float(s), str(k)) for r, d, b, s, k in zip(rows, deaths, births, share, band)],
    )
    # Indicators: the first level in sorted order ("large") is the reference.
    X = np.column_stack([np.ones(len(rows)), share, band == "medium", band == "small"]).astype(float)
    model = NegativeBinomial(deaths, X, exposure=births, loglike_method="nb2")
    result = model.fit(method="newton", maxiter=200, tol=1e-14, disp=0)
    params, bse = result.params, result.bse
    alpha = params[-1]
    return {
        "names": ["intercept", "nonwhite_share", "birth_band=medium", "birth_band=small"],
        "coefficients": params[:-1].tolist(),
        "coefficient_se": bse[:-1].tolist(),
        "shape": 1.0 / alpha,
        "shape_se": bse[-1] / alpha**2,
        "log_likelihood": float(result.llf),
        "source": "statsmodels NegativeBinomial(loglike_method='nb2', exposure=births), Newton to 1e-14",
    }


def star98():
    d = sm.datasets.star98.load_pandas().data
    k = d["NABOVE"].to_numpy()
    n = (d["NABOVE"] + d["NBELOW"]).to_numpy()
    lowinc, perminte = d["LOWINC"].to_numpy(), d["PERMINTE"].to_numpy()
    ids = [f"district-{i + 1:03d}" for i in range(len(k))]
    write(
        "star98_districts.csv",
        ["district", "above", "pupils", "lowinc", "perminte"],
        [(i, int(a), int(b), float(x), float(y)) for i, a, b, x, y in zip(ids, k, n, lowinc, perminte)],
    )
    X = np.column_stack([np.ones(len(k)), lowinc, perminte])

    def negll(theta):
        b, m = theta[:-1], np.exp(theta[-1])
        mu = special.expit(X @ b)
        return -np.sum(stats.betabinom.logpmf(k, n, mu * m, (1 - mu) * m))

    def gradient(theta):
        # The handbook derivatives of the beta-binomial log pmf in (alpha, beta),
        # d/d alpha = psi(k + a) - psi(n + a + b) - psi(a) + psi(a + b), and
        # likewise in beta, by the chain rule to (b, ln m).
        b, m = theta[:-1], np.exp(theta[-1])
        mu = special.expit(X @ b)
        a, c = mu * m, (1 - mu) * m
        common = -special.digamma(n + m) + special.digamma(m)
        da = special.digamma(k + a) - special.digamma(a) + common
        dc = special.digamma(n - k + c) - special.digamma(c) + common
        d_eta = (da - dc) * m * mu * (1 - mu)
        d_log_m = da * a + dc * c
        return -np.append(X.T @ d_eta, d_log_m.sum())

    start = np.zeros(X.shape[1] + 1)
    start[0] = special.logit(k.sum() / n.sum())
    start[-1] = np.log(50.0)
    theta = optimize.minimize(negll, start, jac=gradient, method="BFGS", options={"gtol": 1e-12, "maxiter": 10000}).x
    for _ in range(8):
        # Newton on the analytic gradient, its Jacobian by central differences.
        jacobian = np.column_stack(
            [(gradient(theta + h) - gradient(theta - h)) / (2e-6) for h in np.eye(len(theta)) * 1e-6]
        )
        theta = theta - np.linalg.solve(0.5 * (jacobian + jacobian.T), gradient(theta))
    hess = approx_hess3(theta, negll)
    cov = np.linalg.inv(hess)
    se = np.sqrt(np.diag(cov))
    bb = {
        "names": ["intercept", "lowinc", "perminte"],
        "coefficients": theta[:-1].tolist(),
        "coefficient_se": se[:-1].tolist(),
        "strength": float(np.exp(theta[-1])),
        "strength_se": float(np.exp(theta[-1]) * se[-1]),
        "log_likelihood": float(-negll(theta)),
        "source": "scipy.stats.betabinom.logpmf summed, scipy.optimize.minimize (BFGS, digamma gradient) then Newton; SEs by statsmodels approx_hess3",
    }
    # The same districts as estimates: logits with delta-method standard errors.
    below = n - k
    y = np.log(k / below)
    s = np.sqrt(1.0 / k + 1.0 / below)
    write(
        "star98_logits.csv",
        ["district", "logit_above", "logit_se", "lowinc", "perminte"],
        [(i, float(a), float(b), float(x), float(z)) for i, a, b, x, z in zip(ids, y, s, lowinc, perminte)],
    )

    def profile(tau2, restricted):
        w = 1.0 / (s * s + tau2)
        xtwx = X.T @ (w[:, None] * X)
        b = np.linalg.solve(xtwx, X.T @ (w * y))
        r = y - X @ b
        ll = -0.5 * np.sum(np.log(2 * np.pi / w) + w * r * r)
        if restricted:
            ll += -0.5 * np.linalg.slogdet(xtwx)[1] + 0.5 * X.shape[1] * np.log(2 * np.pi)
        return ll, b, xtwx

    normal = {}
    for method, restricted in [("ml", False), ("reml", True)]:
        found = optimize.minimize_scalar(
            lambda t: -profile(np.exp(t), restricted)[0], bounds=(-12, 3), method="bounded",
            options={"xatol": 1e-13},
        )
        tau2 = float(np.exp(found.x))
        ll, b, xtwx = profile(tau2, restricted)

        def objective(theta):
            # The (restricted) log likelihood in (b, ln tau^2), for the observed information.
            beta, t2 = theta[:-1], np.exp(theta[-1])
            w = 1.0 / (s * s + t2)
            r = y - X @ beta
            value = -0.5 * np.sum(np.log(2 * np.pi / w) + w * r * r)
            if restricted:
                xtwx_t = X.T @ (w[:, None] * X)
                value += -0.5 * np.linalg.slogdet(xtwx_t)[1] + 0.5 * X.shape[1] * np.log(2 * np.pi)
            return -value

        cov = np.linalg.inv(approx_hess3(np.append(b, np.log(tau2)), objective))
        normal[method] = {
            "names": ["intercept", "lowinc", "perminte"],
            "coefficients": b.tolist(),
            "coefficient_se": np.sqrt(np.diag(cov))[:-1].tolist(),
            "tau2_se": float(tau2 * np.sqrt(cov[-1, -1])),
            "tau2": tau2,
            "log_likelihood": float(ll),
            "source": "numpy profile likelihood, scipy.optimize.minimize_scalar (bounded) over ln tau^2 to 1e-13",
        }
    return bb, normal


if __name__ == "__main__":
    nb2 = sids()
    bb, normal = star98()
    with open(f"{OUT}/references.json", "w") as f:
        json.dump({"gamma_poisson": nb2, "beta_binomial": bb, "normal_ml": normal["ml"], "normal_reml": normal["reml"]}, f, indent=1)
        f.write("\n")
