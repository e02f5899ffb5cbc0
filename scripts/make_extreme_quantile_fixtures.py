"""Beta and gamma quantiles at extreme shapes, by arbitrary-precision
integration: tests/fixtures/extreme_quantiles.json.

Every Beta(a, b) with a and b from SHAPES (1e-3 to 1e15, both orders) and
every Gamma(a) with a from SHAPES, at tail probabilities 0.025 and 1e-6, lower
and upper. Near 0 (a beta point with (a + b)x < 1, a gamma point below 1)
the tail is the hypergeometric series of DLMF 8.17.8 or 8.5.1, which mpmath
sums at 60 digits; elsewhere it is mpmath.quad (tanh-sinh) of the density,
written in logs at 60 digits, over the interval from the point to the far end
of the support, split every few standard deviations (or fractions of the
distance to a singular end) and cut where the density has fallen e^-250 below
its value at the point. The quantile is
the root of tail(x) = p found by Newton steps in ln x on ln tail(x) from
scipy's ppf/isf (or, where scipy returns 0, 1 or a non-finite value, from a
normal or small-x approximation), on the side of the nearer end of the
support (a beta point above 1/2 as 1 minus the mirrored one), stopped when a step moves x by less than
1e-25 relative. The series do not converge usefully when both shapes are
large, which is why integration is used there.

Run from the repository root (about 5 minutes):
python3 scripts/make_extreme_quantile_fixtures.py
"""
import json
import math

import mpmath
from mpmath import mp, mpf
from scipy import stats

mp.dps = 60
SHAPES = [1e-3, 0.587, 1.0, 30.0, 1e3, 1e5, 1e7, 1e9, 1e11, 1e13, 1e15]
TAILS = [0.025, 1e-6]


def beta_log_density(a, b):
    a, b = mpf(a), mpf(b)
    ln_norm = mpmath.loggamma(a) + mpmath.loggamma(b) - mpmath.loggamma(a + b)
    return lambda x: (a - 1) * mpmath.log(x) + (b - 1) * mpmath.log1p(-x) - ln_norm


def gamma_log_density(a):
    a = mpf(a)
    ln_norm = mpmath.loggamma(a)
    return lambda x: (a - 1) * mpmath.log(x) - x - ln_norm


def tail_mass(log_density, x, upper, support_end, scale):
    """Integral of the density from x to the end of the support on the given
    side, split every 4 * scale, and stopped where the density has fallen
    e^-250 below its value at x (or at the end of the support)."""
    step = 4 * scale
    floor = log_density(x) - 250
    points = [x]
    for _ in range(5000):
        nxt = points[-1] + step if upper else points[-1] - step
        if (upper and nxt >= support_end) or (not upper and nxt <= 0):
            points.append(support_end if upper else mpf(0))
            break
        points.append(nxt)
        if log_density(nxt) < floor:
            break
    else:
        raise RuntimeError("the tail did not fall off")
    if not upper:
        points.reverse()
        # Toward a singular end at 0, split geometrically too.
        if points[0] == 0:
            first = points[1]
            points = [mpf(0)] + [first * mpf(10) ** (-k) for k in range(39, 0, -1)] + points[1:]
    return mpmath.quad(lambda t: mpmath.exp(log_density(t)), points)


def beta_tail(a, b):
    """The tail of Beta(a, b) at x: DLMF 8.17.8's series where (a + b)x < 1
    (fast, and exact near a singular end at 0), else integration."""
    density = beta_log_density(a, b)
    scale = beta_scale(a, b)
    am, bm = mpf(a), mpf(b)
    ln_norm = mpmath.loggamma(am) + mpmath.loggamma(bm) - mpmath.loggamma(am + bm)

    def tail(x, upper):
        if (am + bm) * x < 1 and x < mpf(0.5):
            front = mpmath.exp(am * mpmath.log(x) + bm * mpmath.log1p(-x) - mpmath.log(am) - ln_norm)
            lower = front * mpmath.hyp2f1(am + bm, 1, am + 1, x)
            return 1 - lower if upper else lower
        return tail_mass(density, x, upper, 1, scale(x))
    return density, tail


def gamma_tail(a):
    """The tail of Gamma(a) at x: DLMF 8.5.1's series below x = 1, else integration."""
    density = gamma_log_density(a)
    am = mpf(a)
    sd = mpf(math.sqrt(a))

    def tail(x, upper):
        if x < 1:
            lower = mpmath.exp(am * mpmath.log(x) - x - mpmath.loggamma(am + 1)) * mpmath.hyp1f1(1, am + 1, x)
            return 1 - lower if upper else lower
        return tail_mass(density, x, upper, mpmath.inf, min(max(sd, 1), x / 8))
    return density, tail


def solve(log_density, tail, p, upper, start, support_end):
    """Newton in ln x on ln tail(x) = ln p."""
    x = mpf(start)
    target = mpmath.log(mpf(p))
    for _ in range(100):
        mass = tail(x, upper)
        # d ln tail / d ln x = -/+ x f(x) / tail.
        slope = x * mpmath.exp(log_density(x)) / mass * (-1 if upper else 1)
        step = (mpmath.log(mass) - target) / slope
        step = max(min(step, 50), -50)
        x = x * mpmath.exp(-step)
        if support_end == 1 and x >= 1:
            x = (1 + x / mpmath.exp(-step)) / 2
        if abs(step) < mpf("1e-25"):
            return x
    raise RuntimeError(f"no convergence from {start}")


def beta_start(a, b, p, upper):
    guess = stats.beta.isf(p, a, b) if upper else stats.beta.ppf(p, a, b)
    if not upper and a < 1 and guess < 1e-300:
        # I_x(a, b) ≈ x^a / (a B(a, b)) for small x, beyond doubles.
        ln_beta = mpmath.loggamma(a) + mpmath.loggamma(b) - mpmath.loggamma(a + b)
        return mpmath.exp((mpmath.log(p) + mpmath.log(a) + ln_beta) / a)
    mean = a / (a + b)
    sd = math.sqrt(a * b / ((a + b) ** 2 * (a + b + 1)))
    if math.isfinite(guess) and 0 < guess < 1 and abs(guess - mean) < 60 * sd:
        return guess
    if b > 1e3 * a:
        # Beta(a, b) ≈ Gamma(a) / (a + b) when b is much the larger.
        return (stats.gamma.isf(p, a) if upper else stats.gamma.ppf(p, a)) / (a + b)
    z = stats.norm.isf(p)
    return min(max(mean + (z if upper else -z) * sd, mean * 1e-3), 1 - 1e-15)


def gamma_start(a, p, upper):
    guess = stats.gamma.isf(p, a) if upper else stats.gamma.ppf(p, a)
    if not upper and a < 1 and guess < 1e-300:
        # P(a, x) ≈ x^a / Γ(a + 1) for small x, beyond doubles.
        return mpmath.exp((mpmath.log(p) + mpmath.loggamma(a + 1)) / a)
    if math.isfinite(guess) and guess > 0:
        return guess
    z = stats.norm.isf(p)
    return max(a + (z if upper else -z) * math.sqrt(a), a * 1e-3)


def beta_quantile(a, b, p, upper):
    """The quantile, solved on the side of the nearer end: a point above ½
    is 1 − (the mirrored Beta(b, a)'s point of the other tail), whose
    digits near 0 mpmath keeps."""
    start = beta_start(a, b, p, upper)
    if start > 0.5:
        return 1 - beta_quantile(b, a, p, not upper)
    density, tail = beta_tail(a, b)
    return solve(density, tail, p, upper, start, 1)


def beta_scale(a, b):
    # The local standard deviation: of the beta where it has one, and a
    # fraction of x near a singular end.
    sd = mpf(math.sqrt(a * b / ((a + b) ** 2 * (a + b + 1))))
    return lambda x: min(sd, x / 8, (1 - x) / 8) if x < 1 else sd


def main():
    beta_rows, gamma_rows = [], []
    for a in SHAPES:
        for b in SHAPES:
            for p in TAILS:
                row = {"a": a, "b": b, "p": p}
                for key, upper in [("lower", False), ("upper", True)]:
                    row[key] = float(beta_quantile(a, b, p, upper))
                beta_rows.append(row)
        print("beta", a, flush=True)
        density, tail = gamma_tail(a)
        for p in TAILS:
            row = {"shape": a, "p": p}
            for key, upper in [("lower", False), ("upper", True)]:
                row[key] = float(solve(density, tail, p, upper, gamma_start(a, p, upper), mpmath.inf))
            gamma_rows.append(row)
    json.dump({"source": "mpmath 1.3 quad of the densities at 60 digits, Newton in ln x from scipy's ppf/isf "
                         "(scripts/make_extreme_quantile_fixtures.py)",
               "beta": beta_rows, "gamma": gamma_rows},
              open("tests/fixtures/extreme_quantiles.json", "w"), indent=1)


if __name__ == "__main__":
    main()
