"""Reference exceedance probabilities: both tails of Beta(a, b) and
Gamma(shape, rate) at thresholds across the range, from mpmath at 50 digits
(the Beta tail by DLMF 8.17.8's series and the Gamma tails by DLMF 8.7.1
and 8.9.2, summed at 50 digits: mpmath's own betainc and gammainc stop
converging at shapes of 1e5). The script checks its Gamma tails against
mpmath's gammainc where that converges.

`tests/integration/reference.rs` checks `prob_below` / `prob_above` (the
models' `rate_tails`) against these: within 1e-12 absolute and 1e-9 relative
wherever the probability exceeds 1e-300.

Run from the repository root (mpmath from PyPI; about a minute):
    python3 scripts/make_exceedance_fixtures.py
"""
import json

import mpmath as mp

mp.mp.dps = 50
SHAPES = [1e-3, 0.5, 3.0, 40.0, 1e3, 1e5]
PROPORTIONS = [1e-9, 1e-4, 0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99, 1 - 1e-6]
GAMMA_SHAPES = [1e-3, 0.5, 3.0, 40.0, 1e3, 1e5, 1e7]
RATES = [0.1, 1.0, 50.0]
# Thresholds as multiples of the mean, from far below to far above it.
MULTIPLES = [1e-6, 0.01, 0.5, 0.9, 0.99, 1.0, 1.01, 1.1, 2.0, 10.0]


def beta_lower_series(a, b, x):
    """I_x(a, b) by DLMF 8.17.8: x^a (1 - x)^b / (a B(a, b)) 2F1(a + b, 1; a + 1; x),
    whose terms shrink fast below the switch point (a + 1) / (a + b + 2)."""
    a, b, x = mp.mpf(a), mp.mpf(b), mp.mpf(x)
    log_front = a * mp.log(x) + b * mp.log1p(-x) - mp.log(a) - (mp.loggamma(a) + mp.loggamma(b) - mp.loggamma(a + b))
    # The series summed directly: term ratio (a + b + j) x / (a + 1 + j) < 1 here.
    total, term, j = mp.mpf(1), mp.mpf(1), 0
    while True:
        term *= (a + b + j) * x / (a + 1 + j)
        total += term
        j += 1
        if term < total * mp.mpf(10) ** -55:
            break
    return mp.exp(log_front) * total


def beta_tails(a, b, t):
    """(I_t(a, b), 1 - I_t(a, b)), the smaller-side tail by the series."""
    if t < (a + 1) / (a + b + 2):
        below = beta_lower_series(a, b, t)
        return below, 1 - below
    above = beta_lower_series(b, a, 1 - mp.mpf(t))
    return 1 - above, above


def gamma_tails(a, x):
    """(P(a, x), Q(a, x)): below a + 1 the series DLMF 8.7.1 for P, above it
    Legendre's continued fraction DLMF 8.9.2 for Q (modified Lentz), each the
    smaller side; the other as the complement at 50 digits."""
    a, x = mp.mpf(a), mp.mpf(x)
    if x == 0:
        return mp.mpf(0), mp.mpf(1)
    log_front = a * mp.log(x) - x - mp.loggamma(a)
    if x < a + 1:
        total, term, j = 1 / a, 1 / a, 1
        while True:
            term *= x / (a + j)
            total += term
            j += 1
            if term < total * mp.mpf(10) ** -55:
                break
        below = mp.exp(log_front) * total
        return below, 1 - below
    tiny = mp.mpf(10) ** -300
    b = x + 1 - a
    c, d = 1 / tiny, 1 / b
    h = d
    i = 1
    while True:
        an = -i * (i - a)
        b += 2
        d = an * d + b
        d = tiny if d == 0 else d
        c = b + an / c
        c = tiny if c == 0 else c
        d = 1 / d
        delta = d * c
        h *= delta
        i += 1
        if abs(delta - 1) < mp.mpf(10) ** -55:
            break
    above = mp.exp(log_front) * h
    return 1 - above, above


def main():
    beta = []
    for a in SHAPES:
        for b in SHAPES:
            for t in PROPORTIONS:
                below, above = beta_tails(a, b, t)
                beta.append({"a": a, "b": b, "t": t, "below": float(below), "above": float(above)})
    gamma = []
    for shape in GAMMA_SHAPES:
        for rate in RATES:
            for m in MULTIPLES:
                t = float(mp.mpf(shape) / rate * m)
                x = mp.mpf(rate) * mp.mpf(t)
                below, above = gamma_tails(shape, x)
                gamma.append({"shape": shape, "rate": rate, "t": t, "below": float(below), "above": float(above)})
    for shape in (0.5, 3.0, 40.0):
        for x in (0.01, 1.0, 5.0, 100.0):
            ours = gamma_tails(shape, x)
            theirs = mp.gammainc(shape, 0, x, regularized=True), mp.gammainc(shape, x, mp.inf, regularized=True)
            assert all(abs(o - t) <= mp.mpf(10) ** -40 * max(abs(t), mp.mpf(10) ** -300) for o, t in zip(ours, theirs))
            ours = beta_tails(shape, 2 * shape, x / 101)
            theirs = mp.betainc(shape, 2 * shape, 0, x / 101, regularized=True)
            assert abs(ours[0] - theirs) <= mp.mpf(10) ** -40 * max(abs(theirs), mp.mpf(10) ** -300)
    fixture = {"source": f"mpmath {mp.__version__}, 50 digits", "beta": beta, "gamma": gamma}
    with open("tests/fixtures/exceedance.json", "w") as f:
        json.dump(fixture, f, indent=1)
        f.write("\n")
    print(f"{len(beta)} beta and {len(gamma)} gamma cases")


if __name__ == "__main__":
    main()
