"""Computes the reference values the tests compare against, with
general-purpose libraries from the Python registry, and writes them to
tests/fixtures/ so that `cargo test` needs no Python.

Run: python3 scripts/make_reference_fixtures.py
Needs: numpy, scipy, statsmodels, mpmath (pip install numpy scipy statsmodels).
Versions used for the committed fixtures are recorded in each file.

Sources:
* log pmfs: mpmath at 50 significant digits (loggamma sums), cross-checked
  against scipy.stats.betabinom / nbinom where scipy is accurate;
* quantiles: scipy.stats.beta.ppf / isf and gamma.ppf / isf (Boost inverses);
* beta-binomial fit: scipy.optimize.minimize on the summed betabinom.logpmf;
* gamma-Poisson fit: statsmodels' NegativeBinomial (NB2) regression with an
  intercept and offset log(exposure); shape = 1/alpha, rate = shape/exp(const);
* open data: statsmodels.datasets.cancer (county breast-cancer deaths and
  population, from Rice, "Mathematical Statistics and Data Analysis").
"""

import json
import pathlib
import signal

import mpmath
import numpy as np
import scipy
import statsmodels
import statsmodels.api as sm
from scipy import optimize, special, stats

OUT = pathlib.Path(__file__).resolve().parent.parent / "tests" / "fixtures"
SEED = 7_2026
mpmath.mp.dps = 50
VERSIONS = {"numpy": np.__version__, "scipy": scipy.__version__,
            "statsmodels": statsmodels.__version__, "mpmath": mpmath.__version__}


def dump(name, payload):
    payload = {"versions": VERSIONS, **payload}
    (OUT / name).write_text(json.dumps(payload, indent=1) + "\n")


def mp_betabinom_logpmf(k, n, a, b):
    k, n, a, b = (mpmath.mpf(v) for v in (k, n, a, b))
    lg = mpmath.loggamma
    return float(lg(n + 1) - lg(k + 1) - lg(n - k + 1)
                 + lg(k + a) + lg(n - k + b) - lg(n + a + b)
                 - lg(a) - lg(b) + lg(a + b))


def mp_nbinom_logpmf(y, e, shape, rate):
    y, e, shape, rate = (mpmath.mpf(v) for v in (y, e, shape, rate))
    lg = mpmath.loggamma
    return float(lg(y + shape) - lg(shape) - lg(y + 1)
                 + shape * mpmath.log(rate / (rate + e)) + y * mpmath.log(e / (rate + e)))


def pmf_fixture():
    bb = []
    for n, k in [(0, 0), (1, 0), (1, 1), (10, 3), (50, 50), (200, 7), (5000, 2500), (10**6, 123456), (10**12, 3 * 10**11)]:
        for mean in [0.01, 0.3, 0.9]:
            for strength in [1e-3, 0.5, 20.0, 1e4, 1e8, 1e12, 1e15]:
                a, b = mean * strength, (1 - mean) * strength
                bb.append({"k": k, "n": n, "alpha": a, "beta": b, "logpmf": mp_betabinom_logpmf(k, n, a, b)})
    nb = []
    for y in [0, 1, 7, 300, 10**6]:
        for e in [1e-6, 0.3, 25.0, 1e5, 1e9]:
            for shape in [1e-3, 0.7, 15.0, 1e6, 1e12, 1e15]:
                for mean in [0.002, 1.0, 40.0]:
                    rate = shape / mean
                    nb.append({"y": y, "exposure": e, "shape": shape, "rate": rate,
                               "logpmf": mp_nbinom_logpmf(y, e, shape, rate)})
    # scipy agrees with mpmath where lgamma differences are safe (a spot check, kept for the record).
    spot = stats.betabinom.logpmf(3, 10, 0.3 * 20, 0.7 * 20)
    assert abs(spot - mp_betabinom_logpmf(3, 10, 6.0, 14.0)) < 1e-12
    dump("log_pmf.json", {"source": "mpmath loggamma at 50 digits", "beta_binomial": bb, "negative_binomial": nb})


def mp_gamma_lower(a, x):
    """P(a, x) = x^a e^-x / Γ(a+1) · 1F1(1; a+1; x) (DLMF 8.5.1 with Kummer's transformation)."""
    a, x = mpmath.mpf(a), mpmath.mpf(x)
    front = mpmath.exp(a * mpmath.log(x) - x - mpmath.loggamma(a + 1))
    return front * mpmath.hyp1f1(1, a + 1, x, maxterms=10**7)


def mp_beta_lower(a, b, x):
    """I_x(a, b) = x^a (1-x)^b / (a B(a,b)) · 2F1(a+b, 1; a+1; x) (DLMF 8.17.8), by the
    side where the series converges fast."""
    a, b, x = mpmath.mpf(a), mpmath.mpf(b), mpmath.mpf(x)
    if x > (a + 1) / (a + b + 2):
        return 1 - mp_beta_lower(b, a, 1 - x)
    front = mpmath.exp(a * mpmath.log(x) + b * mpmath.log1p(-x) - mpmath.log(a) - mpmath.log(mpmath.beta(a, b)))
    return front * mpmath.hyp2f1(a + b, 1, a + 1, x, maxterms=10**7)


class TooSlow(Exception):
    pass


def _alarm(signum, frame):
    raise TooSlow()


signal.signal(signal.SIGALRM, _alarm)
REFINED = {"mpmath": 0, "scipy only": 0}


def refine(start, cdf, log_density, target):
    """Newton steps at 50 digits on cdf(x) = target from scipy's value; where
    mpmath's series would take over 10 s, scipy's value is kept as it is."""
    x = mpmath.mpf(start)
    if x <= mpmath.mpf("1e-300"):
        return float(x)
    signal.alarm(10)
    try:
        for _ in range(2):  # scipy's start is close: two steps are quadratic convergence
            x = x - (cdf(x) - target) / mpmath.exp(log_density(x))
        REFINED["mpmath"] += 1
        return float(x)
    except TooSlow:
        REFINED["scipy only"] += 1
        return float(start)
    finally:
        signal.alarm(0)


def quantile_fixture():
    """scipy's quantiles refined by Newton steps on mpmath's CDF (scipy's own
    gamma tails are off by up to 7e-6 in probability at shape 1e6, which is
    why it is only the starting point)."""
    shapes = [1e-3, 1e-2, 0.1, 0.5, 1.0, 2.5, 10.0, 100.0, 1e3, 1e4, 1e5, 1e6, 1e7]
    tails = [1e-6, 0.005, 0.025, 0.05, 0.25]
    gamma_rows, beta_rows = [], []
    for a in shapes:
        log_density = lambda x, a=a: (a - 1) * mpmath.log(x) - x - mpmath.loggamma(a)
        cdf = lambda x, a=a: mp_gamma_lower(a, x)
        for p in tails:
            lower = refine(stats.gamma.ppf(p, a), cdf, log_density, p)
            upper = refine(stats.gamma.isf(p, a), cdf, log_density, 1 - mpmath.mpf(p))
            gamma_rows.append({"shape": a, "p": p, "lower": lower, "upper": upper,
                               "scipy_lower": float(stats.gamma.ppf(p, a)), "scipy_upper": float(stats.gamma.isf(p, a))})
    beta_shapes = [1e-3, 0.1, 1.0, 10.0, 1e3, 1e5, 1e7]
    for a in beta_shapes:
        for b in beta_shapes:
            log_density = lambda x, a=a, b=b: ((a - 1) * mpmath.log(x) + (b - 1) * mpmath.log1p(-x)
                                               - mpmath.log(mpmath.beta(a, b)))
            cdf = lambda x, a=a, b=b: mp_beta_lower(a, b, x)
            for p in [0.005, 0.025, 0.25]:
                lower = refine(stats.beta.ppf(p, a, b), cdf, log_density, p)
                # The upper point is refined through 1 - x to keep its digits near 1.
                mirror = lambda y, a=a, b=b: mp_beta_lower(b, a, y)
                mirror_density = lambda y, a=a, b=b: ((b - 1) * mpmath.log(y) + (a - 1) * mpmath.log1p(-y)
                                                      - mpmath.log(mpmath.beta(a, b)))
                upper_mirror = refine(stats.beta.ppf(p, b, a), mirror, mirror_density, p)
                upper = float(1 - mpmath.mpf(upper_mirror))
                if upper < 1e-6:
                    # Near 0 the mirrored value has no digits left: refine directly.
                    upper = refine(stats.beta.isf(p, a, b) or 1e-300, cdf, log_density, 1 - mpmath.mpf(p))
                beta_rows.append({"a": a, "b": b, "p": p, "lower": lower, "upper": upper,
                                  "scipy_lower": float(stats.beta.ppf(p, a, b)), "scipy_upper": float(stats.beta.isf(p, a, b))})
    dump("quantiles.json", {"source": "scipy.stats gamma/beta ppf and isf, refined by Newton on mpmath hyp1f1/hyp2f1 CDFs at 50 digits",
                            "refined": dict(REFINED), "gamma": gamma_rows, "beta": beta_rows})


def beta_binomial_fit(trials, successes):
    def negative(theta):
        a, b = np.exp(theta)
        return -np.sum(stats.betabinom.logpmf(successes, trials, a, b))

    def gradient(theta):
        a, b = np.exp(theta)
        s = a + b
        ga = special.digamma(successes + a) - special.digamma(a) - special.digamma(trials + s) + special.digamma(s)
        gb = special.digamma(trials - successes + b) - special.digamma(b) - special.digamma(trials + s) + special.digamma(s)
        return -np.array([a * ga.sum(), b * gb.sum()])

    p = successes.sum() / trials.sum()
    start = np.log([p * 10, (1 - p) * 10])
    first = optimize.minimize(negative, start, method="Nelder-Mead", options={"xatol": 1e-12, "fatol": 1e-13, "maxiter": 20000})
    best = optimize.minimize(negative, first.x, jac=gradient, method="BFGS", options={"gtol": 1e-11})
    theta = best.x
    # Newton polish on the analytic gradient (Hessian by central differences of it).
    for _ in range(6):
        h = 1e-6
        hess = np.array([(gradient(theta + h * e) - gradient(theta - h * e)) / (2 * h) for e in np.eye(2)])
        theta = theta - np.linalg.solve(hess, gradient(theta))
    a, b = np.exp(theta)
    return float(a), float(b), float(-negative(theta)), float(np.abs(gradient(theta)).max())


def write_csv(name, header, rows):
    lines = [",".join(header)] + [",".join(str(v) for v in row) for row in rows]
    (OUT / name).write_text("\n".join(lines) + "\n")


def fit_fixtures():
    rng = np.random.default_rng(SEED)
    # Beta-binomial: 400 invented groups, trials from 0 to a few hundred.
    groups = 400
    trials = np.concatenate([[0, 0, 1], rng.integers(1, 300, size=groups - 3)])
    theta = rng.beta(4.0, 11.0, size=groups)
    successes = rng.binomial(trials, theta)
    write_csv("beta_binomial_groups.csv", ["unit", "hits", "tries"],
              [(f"u{i:03d}", k, n) for i, (k, n) in enumerate(zip(successes, trials))])
    a, b, ll, grad = beta_binomial_fit(trials, successes)
    posterior = []
    for k, n in zip(successes, trials):
        pa, pb = a + k, b + n - k
        posterior.append({"mean": pa / (pa + pb), "lower": float(stats.beta.ppf(0.025, pa, pb)),
                          "upper": float(stats.beta.isf(0.025, pa, pb))})
    bb = {"alpha": a, "beta": b, "log_marginal_likelihood": ll, "max_abs_gradient": grad, "posterior": posterior}

    # Beta-binomial with no overdispersion: every group has the same rate 0.2.
    flat_trials = rng.integers(5, 60, size=300)
    flat = rng.binomial(flat_trials, 0.2)
    # Force the moments to show no extra variation: keep a draw whose Tarone numerator is negative.
    while ((flat - flat_trials * flat.sum() / flat_trials.sum()) ** 2).sum() / (0.2 * 0.8) >= flat_trials.sum():
        flat = rng.binomial(flat_trials, 0.2)
    write_csv("binomial_groups.csv", ["unit", "hits", "tries"],
              [(f"f{i:03d}", k, n) for i, (k, n) in enumerate(zip(flat, flat_trials))])
    pooled = flat.sum() / flat_trials.sum()
    flat_ll = float(np.sum(stats.binom.logpmf(flat, flat_trials, pooled)))

    # Gamma-Poisson: 300 invented areas with expected counts.
    areas = 300
    expected = rng.lognormal(0.5, 1.0, size=areas)
    risk = rng.gamma(3.0, 1.0 / 3.0, size=areas)
    observed = rng.poisson(expected * risk)
    write_csv("gamma_poisson_areas.csv", ["area", "cases", "expected"],
              [(f"a{i:03d}", y, repr(float(e))) for i, (y, e) in enumerate(zip(observed, expected))])
    gp = statsmodels_nb(observed, expected)

    # Open data shipped with statsmodels: county breast-cancer deaths over population (thousands).
    cancer = sm.datasets.cancer.load_pandas().data
    deaths = cancer["cancer"].to_numpy().astype(int)
    thousands = cancer["population"].to_numpy() / 1000.0
    write_csv("cancer_counties.csv", ["county", "deaths", "population_thousands"],
              [(f"c{i:03d}", y, repr(float(e))) for i, (y, e) in enumerate(zip(deaths, thousands))])
    cancer_fit = statsmodels_nb(deaths, thousands)

    dump("fits.json", {
        "beta_binomial": {"source": "scipy.optimize.minimize on scipy.stats.betabinom.logpmf", **bb},
        "binomial_boundary": {"source": "scipy.stats.binom.logpmf at the pooled rate", "mean": float(pooled), "log_likelihood": flat_ll},
        "gamma_poisson": {"source": "statsmodels NegativeBinomial (nb2) with offset log(expected)", **gp},
        "cancer_counties": {"source": "statsmodels.datasets.cancer, NegativeBinomial (nb2) with offset log(population/1000)", **cancer_fit},
    })


def statsmodels_nb(y, exposure):
    model = sm.NegativeBinomial(y, np.ones((len(y), 1)), loglike_method="nb2", offset=np.log(exposure))
    rate = y.sum() / exposure.sum()
    lam = exposure * rate
    alpha0 = max(((y - lam) ** 2 - y).sum() / (lam ** 2).sum(), 0.05)
    rough = model.fit(start_params=[np.log(rate), alpha0], method="nm", maxiter=20000, disp=0)
    result = model.fit(start_params=rough.params, method="newton", maxiter=200, tol=1e-14, disp=0)
    const, alpha = result.params
    shape = 1.0 / alpha
    rate = shape / np.exp(const)
    posterior = []
    for count, e in zip(y, exposure):
        pa, pb = shape + count, rate + e
        posterior.append({"mean": pa / pb, "lower": float(stats.gamma.ppf(0.025, pa) / pb),
                          "upper": float(stats.gamma.isf(0.025, pa) / pb)})
    return {"shape": float(shape), "rate": float(rate), "log_marginal_likelihood": float(result.llf),
            "max_abs_score": float(np.abs(model.score(result.params)).max()), "posterior": posterior}


def special_fixture():
    xs = [1e-6, 1e-3, 0.1, 0.5, 1.0, 1.5, 2.0, 7.3, 15.0, 15.5, 42.0, 170.6, 1e3, 1e5, 1e8, 1e12, 1e15]
    rows = [{"x": x, "ln_gamma": float(mpmath.loggamma(x)), "digamma": float(mpmath.digamma(x)),
             "trigamma": float(mpmath.psi(1, x))} for x in xs]
    dump("special.json", {"source": "mpmath loggamma, digamma, psi(1, x) at 50 digits", "values": rows})


def main():
    OUT.mkdir(parents=True, exist_ok=True)
    special_fixture()
    pmf_fixture()
    quantile_fixture()
    fit_fixtures()


if __name__ == "__main__":
    main()
