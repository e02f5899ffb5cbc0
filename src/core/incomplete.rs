//! Regularised incomplete gamma and beta functions, both tails at once.
//!
//! Methods: for the gamma function the power series and Legendre's continued
//! fraction, or from shape 3000 Temme's uniform asymptotic expansion; for the
//! beta function the continued fraction of Numerical Recipes §6.4. Both
//! fractions run a division-free forward recurrence (`continued_fraction`).
//! Each is evaluated on the side where it converges, so that the tail it
//! returns directly is accurate in relative terms and the other is one minus
//! it. The prefactors x^a e^(−x)/Γ(a+1) and
//! x^a (1−x)^b / B(a, b) are taken in Loader's saddle-point form
//! ([`crate::core::special::ln_poisson_pmf`] and `ln_binomial_pmf`) rather
//! than from differences of lnΓ, which keeps them accurate for shapes up to
//! 1e7 and beyond.

use crate::core::special::{deviance_term, ln_beta_remainder, ln_poisson_pmf, log1p_minus};
use crate::core::temme::COEFFICIENTS;
use std::f64::consts::PI;

const MAX_TERMS: usize = 10_000_000;

/// Lower and upper tail probabilities (P, Q) of a distribution at a point.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Tails {
    /// P(X ≤ x).
    pub lower: f64,
    /// P(X > x).
    pub upper: f64,
    /// ln of the kernel at x: x^a e^(−x) / Γ(a), which is x times the
    /// Gamma(a, 1) density, or [`ln_beta_kernel`]; computed on the way and
    /// handed on for Newton steps; −∞ at the edges.
    pub ln_kernel: f64,
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
    let ln_kernel = a.ln() + ln_prefactor;
    if a >= TEMME_FROM {
        if let Some(tails) = temme_tails(a, x, ln_kernel) {
            return tails;
        }
    }
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
        Tails { lower, upper: 1.0 - lower, ln_kernel }
    } else {
        // Q = x^a e^-x / Γ(a) · 1/(x+1−a− 1(1−a)/(x+3−a− …)) (Legendre).
        let first = x + 1.0 - a;
        let h = 1.0
            / continued_fraction(first, |k| {
                let odd = 2.0 * k - 1.0;
                let even = 2.0 * k;
                ((-odd * (odd - a), first + 2.0 * odd), (-even * (even - a), first + 2.0 * even))
            });
        let upper = (ln_kernel + h.ln()).exp().min(1.0);
        Tails { lower: 1.0 - upper, upper, ln_kernel }
    }
}

/// The complementary error function, erfc(x) = Q(1/2, x²) for x ≥ 0 and
/// 2 − erfc(−x) below, accurate in relative terms in the upper tail. (statrs
/// 0.19's erfc is 1e-10 off at 0.5 against mpmath, too coarse for the tails.)
pub fn erfc(x: f64) -> f64 {
    if x < 0.0 {
        return 2.0 - erfc(-x);
    }
    gamma_tails(0.5, x * x).upper
}

/// Shapes from which [`gamma_tails`] uses Temme's uniform expansion, where
/// |η| ≤ [`TEMME_ETA`]. Seven terms in 1/a leave under 1e-17 of the smaller
/// tail from shape 100 (checked at 50 digits by
/// scripts/make_temme_coefficients.py); below 3000 the series and the fraction
/// are cheaper still (`cargo bench --bench quantiles` with 100, 300, 1000,
/// 3000 and 10000 here: 90.9, 84.6, 81.4, 78.6 and 78.7 µs for the gamma row).
const TEMME_FROM: f64 = 3000.0;
/// The largest |η| at which the Taylor rows of [`crate::core::temme`] are used
/// (about 33 standard deviations from the mean at shape 3000; a quantile's
/// iteration stays well inside).
const TEMME_ETA: f64 = 0.6;

/// P(a, x) and Q(a, x) by Temme's uniform asymptotic expansion (DLMF 8.12):
/// with λ = x/a and η²/2 = λ − 1 − ln λ (η of the sign of λ − 1),
/// Q = erfc(η √(a/2))/2 + R and P = erfc(−η √(a/2))/2 − R, where
/// R = e^(−aη²/2) / √(2πa) · Σ_k c_k(η) a^(−k). The smaller tail is formed
/// directly and the other as its complement. Its cost does not grow with a,
/// where the series and the continued fraction take about √a terms. None
/// where |η| is beyond the range of the Taylor rows.
fn temme_tails(a: f64, x: f64, ln_kernel: f64) -> Option<Tails> {
    let t = (x - a) / a;
    let half_eta_squared = -log1p_minus(t);
    let eta = (2.0 * half_eta_squared).sqrt().copysign(t);
    if eta.abs() > TEMME_ETA {
        return None;
    }
    let inverse = 1.0 / a;
    let sum = COEFFICIENTS.iter().rev().fold(0.0, |sum, row| {
        let c = row.iter().rev().fold(0.0, |c, &coefficient| c * eta + coefficient);
        sum * inverse + c
    });
    let remainder = (-a * half_eta_squared).exp() / (2.0 * PI * a).sqrt() * sum;
    let half_erfc = 0.5 * erfc(eta.abs() * (0.5 * a).sqrt());
    Some(if eta >= 0.0 {
        let upper = half_erfc + remainder;
        Tails { lower: 1.0 - upper, upper, ln_kernel }
    } else {
        let lower = half_erfc - remainder;
        Tails { lower, upper: 1.0 - lower, ln_kernel }
    })
}

/// ln of x^a y^b / B(a, b), y = 1 − x given separately to keep its digits;
/// this is x(1 − x) times the Beta(a, b) density at x. With n = a + b it is
/// a ln(nx/a) + b ln(ny/b) − L(a, b) = −bd0(a, nx) − bd0(b, ny) − L(a, b),
/// L being [`ln_beta_remainder`]: small terms only, whatever the shapes.
pub fn ln_beta_kernel(a: f64, b: f64, x: f64, y: f64) -> f64 {
    let n = a + b;
    -ln_beta_remainder(a, b) - deviance_term(a, n * x) - deviance_term(b, n * y)
}

/// Evaluates the continued fraction b₀ + a₁/(b₁ + a₂/(b₂ + …)) by the forward
/// (Wallis) recurrence A_n = b_n A_(n−1) + a_n A_(n−2), the same for B_n, whose
/// ratio A_n/B_n is the n-th convergent. `terms(k)` gives the k-th pair of
/// terms, ((a_(2k−1), b_(2k−1)), (a_2k, b_2k)), for k = 1, 2, ….
///
/// Unlike Lentz's method it needs no division per term (the terms here are
/// sums and products, so the division chain was what bounded the speed).
/// Convergence is judged by the exact difference of successive convergents,
/// |A_n/B_n − A_(n−1)/B_(n−1)| = |a₁ a₂ … a_n| / |B_n B_(n−1)|, whose numerator
/// is a running product free of cancellation. (Differencing the convergents
/// themselves would see only their rounding noise, which near the fraction's
/// switch-over point is tens of ulps and never settles.) A zero partial
/// numerator ends the fraction exactly, and the product then stops it at once;
/// the beta's fraction does so whenever b is a whole number. The recurrence
/// values are rescaled by an exact power of two when they grow large, which
/// changes no ratio and no digit.
fn continued_fraction(b0: f64, mut terms: impl FnMut(f64) -> ((f64, f64), (f64, f64))) -> f64 {
    const BIG: f64 = 1.157_920_892_373_162e77; // 2^256
    const SMALL: f64 = 1.0 / BIG;
    let (mut a_prev, mut a_cur) = (1.0, b0);
    let (mut b_prev, mut b_cur) = (0.0, 1.0);
    // |a₁ ⋯ a_n|, rescaled with the square of the recurrence's factor.
    let mut numerators = 1.0;
    let mut k = 1.0;
    while k < MAX_TERMS as f64 {
        let ((a_odd, b_odd), (a_even, b_even)) = terms(k);
        let (a_mid, b_mid) = (b_odd * a_cur + a_odd * a_prev, b_odd * b_cur + a_odd * b_prev);
        (a_prev, b_prev) = (a_mid, b_mid);
        (a_cur, b_cur) = (b_even * a_mid + a_even * a_cur, b_even * b_mid + a_even * b_cur);
        numerators *= (a_odd * a_even).abs();
        // Converged when |a₁ ⋯ a_n| / |B_n B_(n−1)| ≤ ε |A_n / B_n|.
        if numerators <= f64::EPSILON * (a_cur * b_mid).abs() {
            break;
        }
        if b_cur.abs() > BIG {
            (a_prev, a_cur, b_prev, b_cur) = (a_prev * SMALL, a_cur * SMALL, b_prev * SMALL, b_cur * SMALL);
            numerators *= SMALL * SMALL;
        }
        k += 1.0;
    }
    a_cur / b_cur
}

/// The continued fraction for I_x(a, b) (Numerical Recipes §6.4, eq. 6.4.5)
/// after the equivalence transformation that clears its denominators:
/// 1/(1 + d₁/(1 + d₂/(1 + …))) with d_n = a_n / ((a + n − 1)(a + n)) becomes
/// 1/(1 + a₁/((a + 1) + a₂/((a + 2) + …))), a₁ = −(a + b)x, a_2m = m(b − m)x
/// and a_(2m+1) = −(a + m)(a + b + m)x.
fn beta_continued_fraction(a: f64, b: f64, x: f64) -> f64 {
    let total = a + b;
    let fraction = continued_fraction(1.0, |k| {
        let m = k - 1.0;
        let odd = if k == 1.0 { -total * x } else { -(a + m) * (total + m) * x };
        let even = k * (b - k) * x;
        ((odd, a + 2.0 * k - 1.0), (even, a + 2.0 * k))
    });
    1.0 / fraction
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
        let lower = (ln_kernel - a.ln() + beta_fraction(a, b, x, y).ln()).exp().min(1.0);
        Tails { lower, upper: 1.0 - lower, ln_kernel }
    } else {
        let upper = (ln_kernel - b.ln() + beta_fraction(b, a, y, x).ln()).exp().min(1.0);
        Tails { lower: 1.0 - upper, upper, ln_kernel }
    }
}

/// The continued fraction of I_v(p, q), v ≤ ½ by [`beta_continued_fraction`],
/// v > ½ by [`contracted_beta_fraction`]; w = 1 − v.
fn beta_fraction(p: f64, q: f64, v: f64, w: f64) -> f64 {
    if v <= 0.5 {
        beta_continued_fraction(p, q, v)
    } else {
        contracted_beta_fraction(p, q, v, w)
    }
}

/// The continued fraction of [`beta_continued_fraction`], 1/T with
/// T = 1 + d₁/(1 + d₂/(1 + …)), for v near 1, where each odd d_(2m+1) =
/// −(p + m)(p + q + m)v / ((p + 2m)(p + 2m + 1)) is near −1 when p is large
/// and 1 + d_(2m+1) would lose its digits (Beta(0.587, 6e11) at its upper
/// 2.5% point lost 11). It is contracted to its even part,
/// T = c₁ − d₁d₂/((c₃ + d₂) − d₃d₄/((c₅ + d₄) − …)), whose convergents are
/// the even ones of T, with c_(2m+1) = 1 + d_(2m+1) written in w = 1 − v:
/// ((2m + 1 − q)p + 3m² + (2 − q)m + (p + m)(p + q + m)w) / ((p + 2m)(p + 2m + 1)).
fn contracted_beta_fraction(p: f64, q: f64, v: f64, w: f64) -> f64 {
    let total = p + q;
    let odd = |m: f64| -(p + m) * (total + m) * v / ((p + 2.0 * m) * (p + 2.0 * m + 1.0));
    let even = |m: f64| m * (q - m) * v / ((p + 2.0 * m - 1.0) * (p + 2.0 * m));
    let one_plus_odd = |m: f64| {
        ((2.0 * m + 1.0 - q) * p + 3.0 * m * m + (2.0 - q) * m + (p + m) * (total + m) * w)
            / ((p + 2.0 * m) * (p + 2.0 * m + 1.0))
    };
    // Every term is scaled by s (numerators by s²), which scales T by s: the
    // terms are then of size 1 rather than 1/p, and the recurrence and the
    // product of numerators no longer underflow (for p = 6e11 they did after
    // a dozen levels, which stopped the fraction early).
    let scale = p + 1.0;
    // Level j ≥ 1: numerator −d_(2j−1) d_(2j), denominator c_(2j+1) + d_(2j).
    let level = |j: f64| (-odd(j - 1.0) * even(j) * scale * scale, (one_plus_odd(j) + even(j)) * scale);
    let fraction = continued_fraction(one_plus_odd(0.0) * scale, |k| (level(2.0 * k - 1.0), level(2.0 * k)));
    scale / fraction
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
    fn the_upper_tail_keeps_its_digits_when_one_shape_is_huge_and_x_is_past_the_switch() {
        // Source: mpmath 1.3 quad of the Beta(0.587, 6e11) density at 60
        // digits (scripts/make_extreme_quantile_fixtures.py): the upper tail
        // at x = 4.5695024640477226585e-12 is 0.025 to 1e-19. The plain
        // fraction in 1 − x lost 11 digits here (1 + d₁ ≈ 6e-12).
        let x = 4.569_502_464_047_723e-12;
        let t = beta_tails(0.587, 6e11, x, 1.0 - x);
        assert!((t.upper - 0.025).abs() < 1e-14, "{:e}", t.upper - 0.025);
        let t = beta_tails(6e11, 0.587, 1.0 - x, x);
        assert!((t.lower - 0.025).abs() < 1e-14, "{:e}", t.lower - 0.025);
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
