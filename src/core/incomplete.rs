//! Regularised incomplete gamma and beta functions, both tails at once.
//!
//! Methods: the power series and Legendre continued fraction for the gamma
//! function, and the continued fraction of Numerical Recipes §6.4 (Lentz's
//! method) for the beta function, each evaluated on the side where it
//! converges, so that the tail it returns directly is accurate in relative
//! terms and the other is one minus it. The prefactors x^a e^(−x)/Γ(a+1) and
//! x^a (1−x)^b / B(a, b) are taken in Loader's saddle-point form
//! ([`crate::core::special::ln_poisson_pmf`] and `ln_binomial_pmf`) rather
//! than from differences of lnΓ, which keeps them accurate for shapes up to
//! 1e7 and beyond.

use crate::core::special::{deviance_term, ln_poisson_pmf, stirling_error};
use std::f64::consts::PI;

const TINY: f64 = 1e-300;
const MAX_TERMS: usize = 10_000_000;

/// Lower and upper tail probabilities (P, Q) of a distribution at a point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tails {
    /// P(X ≤ x).
    pub lower: f64,
    /// P(X > x).
    pub upper: f64,
    /// ln of the kernel at x (see [`ln_gamma_kernel`], [`ln_beta_kernel`]),
    /// computed on the way and handed on for Newton steps; −∞ at the edges.
    pub ln_kernel: f64,
}

/// ln of x^a e^(−x) / Γ(a), which is x times the Gamma(a, 1) density at x.
pub fn ln_gamma_kernel(a: f64, x: f64) -> f64 {
    a.ln() + ln_poisson_pmf(a, x)
}

/// P(a, x) and Q(a, x) for the Gamma(a, 1) distribution, a > 0, x ≥ 0.
pub fn gamma_tails(a: f64, x: f64) -> Tails {
    if x <= 0.0 {
        return Tails { lower: 0.0, upper: 1.0, ln_kernel: f64::NEG_INFINITY };
    }
    if x.is_infinite() {
        return Tails { lower: 1.0, upper: 0.0, ln_kernel: f64::NEG_INFINITY };
    }
    let ln_prefactor = ln_poisson_pmf(a, x);
    if x < a + 1.0 {
        // P = x^a e^-x / Γ(a+1) · Σ_n x^n / ((a+1)…(a+n)).
        let mut term = 1.0;
        let mut sum = 1.0;
        let mut denom = a;
        for _ in 0..MAX_TERMS {
            denom += 1.0;
            term *= x / denom;
            sum += term;
            if term < sum * f64::EPSILON * 0.5 {
                break;
            }
        }
        let lower = (ln_prefactor + sum.ln()).exp().min(1.0);
        Tails { lower, upper: 1.0 - lower, ln_kernel: a.ln() + ln_prefactor }
    } else {
        // Q = x^a e^-x / Γ(a) · 1/(x+1−a− 1(1−a)/(x+3−a− …)), modified Lentz.
        let mut b = x + 1.0 - a;
        let mut c = 1.0 / TINY;
        let mut d = 1.0 / b;
        let mut h = d;
        for i in 1..MAX_TERMS {
            let fi = i as f64;
            let an = -fi * (fi - a);
            b += 2.0;
            d = an * d + b;
            if d.abs() < TINY {
                d = TINY;
            }
            c = b + an / c;
            if c.abs() < TINY {
                c = TINY;
            }
            d = 1.0 / d;
            let delta = d * c;
            h *= delta;
            if (delta - 1.0).abs() < f64::EPSILON {
                break;
            }
        }
        let ln_kernel = a.ln() + ln_prefactor;
        let upper = (ln_kernel + h.ln()).exp().min(1.0);
        Tails { lower: 1.0 - upper, upper, ln_kernel }
    }
}

/// ln of x^a y^b / B(a, b), y = 1 − x given separately to keep its digits;
/// this is x(1 − x) times the Beta(a, b) density at x.
pub fn ln_beta_kernel(a: f64, b: f64, x: f64, y: f64) -> f64 {
    let n = a + b;
    let ln_binomial_raw = stirling_error(n)
        - stirling_error(a)
        - stirling_error(b)
        - deviance_term(a, n * x)
        - deviance_term(b, n * y)
        + 0.5 * (n / (2.0 * PI * a * b)).ln();
    (a * b / n).ln() + ln_binomial_raw
}

/// Continued fraction for I_x(a, b) (Numerical Recipes `betacf`).
fn beta_continued_fraction(a: f64, b: f64, x: f64) -> f64 {
    let qab = a + b;
    let qap = a + 1.0;
    let qam = a - 1.0;
    let mut c = 1.0;
    let mut d = 1.0 - qab * x / qap;
    if d.abs() < TINY {
        d = TINY;
    }
    d = 1.0 / d;
    let mut h = d;
    for m in 1..MAX_TERMS {
        let m = m as f64;
        let m2 = 2.0 * m;
        let aa = m * (b - m) * x / ((qam + m2) * (a + m2));
        d = 1.0 + aa * d;
        if d.abs() < TINY {
            d = TINY;
        }
        c = 1.0 + aa / c;
        if c.abs() < TINY {
            c = TINY;
        }
        d = 1.0 / d;
        h *= d * c;
        let aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2));
        d = 1.0 + aa * d;
        if d.abs() < TINY {
            d = TINY;
        }
        c = 1.0 + aa / c;
        if c.abs() < TINY {
            c = TINY;
        }
        d = 1.0 / d;
        let delta = d * c;
        h *= delta;
        if (delta - 1.0).abs() < f64::EPSILON {
            break;
        }
    }
    h
}

/// I_x(a, b) and 1 − I_x(a, b) for the Beta(a, b) distribution; `y` must be
/// 1 − x, computed by the caller without rounding where it can be.
pub fn beta_tails(a: f64, b: f64, x: f64, y: f64) -> Tails {
    if x <= 0.0 {
        return Tails { lower: 0.0, upper: 1.0, ln_kernel: f64::NEG_INFINITY };
    }
    if y <= 0.0 {
        return Tails { lower: 1.0, upper: 0.0, ln_kernel: f64::NEG_INFINITY };
    }
    let ln_kernel = ln_beta_kernel(a, b, x, y);
    if x < (a + 1.0) / (a + b + 2.0) {
        let lower = (ln_kernel - a.ln() + beta_continued_fraction(a, b, x).ln()).exp().min(1.0);
        Tails { lower, upper: 1.0 - lower, ln_kernel }
    } else {
        let upper = (ln_kernel - b.ln() + beta_continued_fraction(b, a, y).ln()).exp().min(1.0);
        Tails { lower: 1.0 - upper, upper, ln_kernel }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exponential_case_is_exact() {
        // Gamma(1, 1) is the unit exponential: P(1, x) = 1 − e^−x (textbook identity).
        for &x in &[1e-8, 0.3, 1.0, 2.0, 30.0] {
            let t = gamma_tails(1.0, x);
            assert!((t.upper - (-x).exp()).abs() <= 1e-14 * (-x).exp());
        }
    }

    #[test]
    fn uniform_case_is_exact() {
        // Beta(1, 1) is uniform; Beta(a, 1) has CDF x^a (textbook identities).
        for &x in &[1e-6, 0.2, 0.5, 0.9] {
            let t = beta_tails(1.0, 1.0, x, 1.0 - x);
            assert!((t.lower - x).abs() <= 1e-14);
            let t = beta_tails(3.5, 1.0, x, 1.0 - x);
            assert!((t.lower - x.powf(3.5)).abs() <= 1e-13 * x.powf(3.5));
        }
    }

    #[test]
    fn tails_sum_to_one() {
        for &(a, b, x) in &[(0.01, 5.0, 0.3), (200.0, 3.0, 0.99), (1e6, 1e6, 0.5)] {
            let t = beta_tails(a, b, x, 1.0 - x);
            assert!((t.lower + t.upper - 1.0).abs() < 1e-14);
            let g = gamma_tails(a, x * a);
            assert!((g.lower + g.upper - 1.0).abs() < 1e-14);
        }
    }
}
