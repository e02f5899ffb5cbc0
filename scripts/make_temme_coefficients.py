"""Coefficients of Temme's uniform asymptotic expansion of the incomplete gamma
function, and reference values to check it and statrs' erfc against.

Temme (1979), also DLMF §8.12: with lambda = x/a and eta the signed root of
eta^2/2 = lambda - 1 - ln(lambda) (sign of lambda - 1),

    Q(a, x) = erfc(eta sqrt(a/2)) / 2 + exp(-a eta^2/2) / sqrt(2 pi a) * sum_k c_k(eta) a^-k,

    c_0(eta) = 1/(lambda - 1) - 1/eta,
    c_k(eta) = (1/eta) c_{k-1}'(eta) + gamma_k/(lambda - 1),

where each constant gamma_k is the one that keeps c_k regular at eta = 0 (they are
the coefficients of Stirling's series, up to sign; the script derives them from
that condition rather than from a table). Everything is done with exact
rational power series in eta, then rounded once to doubles.

Writes src/core/temme.rs (the Taylor coefficients of c_0 .. c_{K-1}) and
tests/fixtures/incomplete_gamma.json (mpmath values of P, Q at large shapes and
of erfc), after checking the truncated expansion against mpmath here.

usage: python3 scripts/make_temme_coefficients.py      (mpmath; about a minute)
"""

from fractions import Fraction
import json
import pathlib

import mpmath

ROOT = pathlib.Path(__file__).resolve().parent.parent
TERMS_K = 7      # c_0 .. c_6
DEGREE = 25      # Taylor terms kept per c_k (powers 0 .. DEGREE-1)
ORDER = DEGREE + 2 * TERMS_K + 2   # working order of the series in eta


def mul(f, g):
    out = [Fraction(0)] * ORDER
    for i, fi in enumerate(f):
        if fi:
            for j in range(ORDER - i):
                out[i + j] += fi * g[j]
    return out


def power(f, alpha):
    """f^alpha for a series with f[0] = 1 (J. C. P. Miller's recurrence)."""
    assert f[0] == 1
    g = [Fraction(0)] * ORDER
    g[0] = Fraction(1)
    for n in range(1, ORDER):
        g[n] = sum(((alpha + 1) * k - n) * f[k] * g[n - k] for k in range(1, n + 1)) / n
    return g


def compose(coefficients, mu):
    """sum_j coefficients[j] mu^j, mu a series without constant term."""
    out = [Fraction(0)] * ORDER
    mu_power = [Fraction(0)] * ORDER
    mu_power[0] = Fraction(1)
    for c in coefficients:
        for i in range(ORDER):
            out[i] += c * mu_power[i]
        mu_power = mul(mu_power, mu)
    return out


def derive():
    # F(mu) = 2 (mu - ln(1 + mu)) / mu^2 = sum_{j>=2} 2 (-1)^j mu^(j-2) / j, so eta = mu sqrt(F(mu)).
    f_coefficients = [Fraction(2 * (-1) ** j, j) for j in range(2, ORDER + 2)]
    # mu = eta S(eta), S = F(mu)^(-1/2): fixed point, one order per round.
    s = [Fraction(0)] * ORDER
    s[0] = Fraction(1)
    for _ in range(ORDER):
        mu = [Fraction(0)] + s[:-1]
        s = power(compose(f_coefficients, mu), Fraction(-1, 2))
    t = power(s, Fraction(-1))  # eta / mu = 1/S
    # c_0 = (T - 1)/eta; gamma_k T/eta is the pole part added at each step.
    c = [t[n + 1] for n in range(ORDER - 1)]
    series, gammas = [c], []
    for _ in range(1, TERMS_K):
        gamma = -c[1]
        gammas.append(gamma)
        c = [(j + 2) * c[j + 2] + gamma * t[j + 1] for j in range(len(c) - 2)]
        series.append(c)
    return [row[:DEGREE] for row in series], gammas


def expansion_smaller_tail(series, a, x):
    """The smaller of P(a, x), Q(a, x) from the truncated expansion, at 50 digits:
    Q = erfc(eta sqrt(a/2))/2 + R for x >= a, P = erfc(-eta sqrt(a/2))/2 - R below."""
    a, x = mpmath.mpf(a), mpmath.mpf(x)
    lam = x / a
    eta = mpmath.sign(lam - 1) * mpmath.sqrt(2 * (lam - 1 - mpmath.log(lam)))
    total = sum(sum(mpmath.mpf(coef.numerator) / coef.denominator * eta ** n for n, coef in enumerate(row))
                * a ** -k for k, row in enumerate(series))
    remainder = mpmath.exp(-a * eta ** 2 / 2) / mpmath.sqrt(2 * mpmath.pi * a) * total
    if eta >= 0:
        return mpmath.erfc(eta * mpmath.sqrt(a / 2)) / 2 + remainder
    return mpmath.erfc(-eta * mpmath.sqrt(a / 2)) / 2 - remainder


def main():
    mpmath.mp.dps = 50
    series, gammas = derive()
    # Stirling: Gamma*(a) = 1 + 1/(12a) + 1/(288a^2) - 139/(51840a^3) ...; the derived constants match up to sign.
    assert [abs(g) for g in gammas[:3]] == [Fraction(1, 12), Fraction(1, 288), Fraction(139, 51840)], gammas[:3]
    assert series[0][0] == Fraction(-1, 3) and series[1][0] == Fraction(-1, 540)
    # The truncated expansion against mpmath's own Q where ratepool uses it (a >= 100, |eta| <= 0.6).
    worst = 0
    for a in [100, 300, 1e3, 1e5, 1e7]:
        for eta in [-0.6, -0.3, -0.05, 0.0, 0.05, 0.3, 0.6]:
            # lambda on the side of 1 that eta's sign gives (the root is double at eta = 0).
            lam = (mpmath.findroot(lambda v: v - 1 - mpmath.log(v) - mpmath.mpf(eta) ** 2 / 2, 1 + eta)
                   if eta else mpmath.mpf(1))
            x = a * lam
            if x >= a:
                exact = mpmath.gammainc(a, x, mpmath.inf, regularized=True)
            else:
                exact = mpmath.gammainc(a, 0, x, regularized=True)
            worst = max(worst, abs(expansion_smaller_tail(series, a, x) - exact) / exact)
    assert worst < 1e-15, worst
    print(f"expansion against mpmath: worst relative error in the smaller tail {mpmath.nstr(worst, 3)}")

    lines = [
        "//! Taylor coefficients of the functions c_k(η) in Temme's uniform asymptotic",
        "//! expansion of the incomplete gamma function (used in",
        "//! [`crate::core::incomplete::gamma_tails`] for large shapes): row k holds",
        "//! c_k(η) = Σ_n C[k][n] ηⁿ. Written by scripts/make_temme_coefficients.py from",
        "//! exact rational series; do not edit by hand.",
        "",
        f"/// C[k][n] for k < {TERMS_K}, n < {DEGREE}.",
        "#[rustfmt::skip]",
        f"pub const COEFFICIENTS: [[f64; {DEGREE}]; {TERMS_K}] = [",
    ]
    for row in series:
        values = ", ".join(repr(float(c)) if c else "0.0" for c in row)
        lines.append(f"    [{values}],")
    lines.append("];")
    (ROOT / "src/core/temme.rs").write_text("\n".join(lines) + "\n")

    # Reference values: P and Q at large shapes around the interval ends, and erfc.
    rows = []
    for a in [100.0, 250.0, 1e3, 2.5e4, 1e6, 1e7]:
        for z in [-6.0, -2.5, -1.96, -0.5, 0.0, 0.5, 1.96, 2.5, 6.0]:
            x = float(a + z * mpmath.sqrt(a))
            # Each tail from the side where mpmath's series converges, the other as its complement.
            if x >= a:
                upper = mpmath.gammainc(a, x, mpmath.inf, regularized=True)
                lower = 1 - upper
            else:
                # DLMF 8.5.1 with Kummer's transformation; mpmath's own series stalls here.
                front = mpmath.exp(a * mpmath.log(x) - x - mpmath.loggamma(a + 1))
                lower = front * mpmath.hyp1f1(1, a + 1, x, maxterms=10**7)
                upper = 1 - lower
            rows.append({"shape": a, "x": x, "lower": float(lower), "upper": float(upper)})
    erfc_rows = [{"x": x, "erfc": float(mpmath.erfc(x))}
                 for x in [0.0, 1e-8, 0.01, 0.3, 0.5, 0.9, 1.5, 2.5, 4.0, 6.0, 10.0, 20.0, 26.0]]
    payload = {"source": "mpmath 1.3 gammainc (regularized) and erfc at 50 digits",
               "gamma": rows, "erfc": erfc_rows}
    (ROOT / "tests/fixtures/incomplete_gamma.json").write_text(json.dumps(payload, indent=1) + "\n")


if __name__ == "__main__":
    main()
