"""Reference fits at the edges of the parameter range, for tests/integration/edges.rs.

Invented data sets (numpy, fixed seed) whose maximum-likelihood prior lies at a
strength near 1e8 (trials up to 1e12), near 1e-3, and a gamma-Poisson set with
exposures from 1e-6 to 1e9. The log marginal likelihood is summed from
mpmath's loggamma (scipy's betabinom loses its digits at these strengths), and
maximised with scipy's Nelder-Mead in (logit mean, ln strength) or (ln mean,
ln shape), then polished by Newton steps on mpmath central differences.

Run from the repository root: python3 scripts/make_edge_fixtures.py
"""
import json
import pathlib
import sys

import mpmath
import numpy as np
import scipy
from scipy import optimize

sys.path.insert(0, str(pathlib.Path(__file__).parent))
from make_reference_fixtures import mp_betabinom_logpmf, mp_nbinom_logpmf  # noqa: E402

mpmath.mp.dps = 40
OUT = pathlib.Path("tests/fixtures")
rng = np.random.default_rng(20261203)


def beta_binomial_ll(u, rows):
    mean, strength = 1 / (1 + np.exp(-u[0])), np.exp(u[1])
    a, b = mean * strength, (1 - mean) * strength
    return sum(mp_betabinom_logpmf(k, n, a, b) for k, n in rows)


def gamma_poisson_ll(u, rows):
    mean, shape = np.exp(u[0]), np.exp(u[1])
    return sum(mp_nbinom_logpmf(y, e, shape, shape / mean) for y, e in rows)


def maximise(ll, start, rows):
    result = optimize.minimize(lambda u: -ll(u, rows), start, method="Nelder-Mead",
                               options={"xatol": 1e-11, "fatol": 1e-13, "maxiter": 4000})
    u = result.x.copy()
    h = 1e-5
    for _ in range(4):  # Newton polish on central differences
        e = np.eye(2) * h
        g = np.array([(ll(u + e[i], rows) - ll(u - e[i], rows)) / (2 * h) for i in range(2)])
        hess = np.array([[(ll(u + e[i] + e[j], rows) - ll(u + e[i] - e[j], rows)
                           - ll(u - e[i] + e[j], rows) + ll(u - e[i] - e[j], rows)) / (4 * h * h)
                          for j in range(2)] for i in range(2)])
        step = np.linalg.solve(hess, g)
        if ll(u - step, rows) >= ll(u, rows):
            u = u - step
    return u, ll(u, rows)


def beta_binomial_case(name, mean, strength, trials):
    a, b = mean * strength, (1 - mean) * strength
    share = rng.beta(a, b, len(trials))
    successes = rng.binomial(trials, share)
    rows = [(int(k), int(n)) for k, n in zip(successes, trials)]
    has = trials > 0
    start = [np.log(mean / (1 - mean)), np.log(strength)]
    u, ll = maximise(beta_binomial_ll, start, rows)
    fitted_mean, fitted_strength = 1 / (1 + np.exp(-u[0])), np.exp(u[1])
    print(f"{name}: strength {fitted_strength:.6g}, mean {fitted_mean:.9g}, ll {ll:.12g}", file=sys.stderr)
    return {"rows": [{"successes": k, "trials": n} for k, n in rows],
            "alpha": fitted_mean * fitted_strength, "beta": (1 - fitted_mean) * fitted_strength,
            "log_marginal_likelihood": ll, "raw_rate_count": int(has.sum())}


def gamma_poisson_case(name, shape, rate, exposures):
    rates = rng.gamma(shape, 1 / rate, len(exposures))
    events = rng.poisson(rates * exposures)
    rows = [(int(y), float(e)) for y, e in zip(events, exposures)]
    u, ll = maximise(gamma_poisson_ll, [np.log(shape / rate), np.log(shape)], rows)
    fitted_mean, fitted_shape = np.exp(u[0]), np.exp(u[1])
    print(f"{name}: shape {fitted_shape:.6g}, mean {fitted_mean:.9g}, ll {ll:.12g}", file=sys.stderr)
    return {"rows": [{"events": y, "exposure": e} for y, e in rows],
            "shape": fitted_shape, "rate": fitted_shape / fitted_mean, "log_marginal_likelihood": ll}


def main():
    huge = np.concatenate([np.full(60, 10**9), np.full(30, 10**10), np.full(10, 10**12)])
    tiny = rng.integers(5, 40, 150)
    exposures = 10 ** rng.uniform(-6, 9, 200)
    cases = {
        "strength_near_1e8": beta_binomial_case("strength_near_1e8", 0.3, 1e8, huge),
        "strength_near_1e-3": beta_binomial_case("strength_near_1e-3", 0.4, 1e-3, tiny),
        "exposures_1e-6_to_1e9": gamma_poisson_case("exposures_1e-6_to_1e9", 4.0, 2e-3, exposures),
    }
    versions = {"numpy": np.__version__, "scipy": scipy.__version__, "mpmath": mpmath.__version__}
    payload = {"source": "mpmath loggamma sums at 40 digits, maximised by scipy Nelder-Mead and Newton",
               "versions": versions, "cases": cases}
    (OUT / "edges.json").write_text(json.dumps(payload, indent=1) + "\n")


if __name__ == "__main__":
    main()
