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
    ln_beta_kernel_with(a, b, ln_beta_remainder(a, b), x, y)
}

/// [`ln_beta_kernel`] with L(a, b) known.
fn ln_beta_kernel_with(a: f64, b: f64, remainder: f64, x: f64, y: f64) -> f64 {
    let n = a + b;
    -remainder - deviance_term(a, n * x) - deviance_term(b, n * y)
}

/// A Beta(a, b) law with what its tails at any point share: L(a, b) of
/// [`ln_beta_kernel`], ln a and ln b.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BetaLaw {
    /// a.
    pub a: f64,
    /// b.
    pub b: f64,
    remainder: f64,
    ln_a: f64,
    ln_b: f64,
}

impl BetaLaw {
    /// Beta(a, b), a, b > 0.
    pub fn new(a: f64, b: f64) -> Self {
        BetaLaw { a, b, remainder: ln_beta_remainder(a, b), ln_a: a.ln(), ln_b: b.ln() }
    }
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
fn continued_fraction(b0: f64, mut terms: impl FnMut(f64) -> Terms) -> f64 {
    continued_fractions([b0], |k| [terms(k)])[0]
}

/// The k-th pair of terms of a continued fraction: ((a_(2k−1), b_(2k−1)), (a_2k, b_2k)).
type Terms = ((f64, f64), (f64, f64));

/// [`continued_fraction`] for `L` fractions side by side (lanes), each
/// lane's arithmetic and its stopping point exactly those it has alone, so
/// every value is the same to the bit. The recurrence is a chain of
/// dependent multiply-adds, whose latency rather than its arithmetic bounds
/// one fraction; independent chains fill the gaps. A lane that has converged
/// is left as it is while the others go on.
fn continued_fractions<const L: usize>(b0: [f64; L], mut terms: impl FnMut(f64) -> [Terms; L]) -> [f64; L] {
    const BIG: f64 = 1.157_920_892_373_162e77; // 2^256
    const SMALL: f64 = 1.0 / BIG;
    // Terms that leave A_n and B_n as they are: a converged lane takes them,
    // so every lane runs the same straight-line code.
    const STAY: Terms = ((0.0, 1.0), (0.0, 1.0));
    let (mut a_prev, mut a_cur) = ([1.0; L], b0);
    let (mut b_prev, mut b_cur) = ([0.0; L], [1.0; L]);
    // |a₁ ⋯ a_n|, rescaled with the square of the recurrence's factor.
    let mut numerators = [1.0; L];
    let mut done = [false; L];
    let mut k = 1.0;
    while k < MAX_TERMS as f64 {
        let mut lane_terms = terms(k);
        for lane in 0..L {
            if done[lane] {
                lane_terms[lane] = STAY;
            }
        }
        let mut b_mids = [0.0; L];
        for lane in 0..L {
            let ((a_odd, b_odd), (a_even, b_even)) = lane_terms[lane];
            let (a_mid, b_mid) =
                (b_odd * a_cur[lane] + a_odd * a_prev[lane], b_odd * b_cur[lane] + a_odd * b_prev[lane]);
            (a_prev[lane], b_prev[lane]) = (a_mid, b_mid);
            (a_cur[lane], b_cur[lane]) =
                (b_even * a_mid + a_even * a_cur[lane], b_even * b_mid + a_even * b_cur[lane]);
            numerators[lane] *= (a_odd * a_even).abs();
            b_mids[lane] = b_mid;
        }
        let mut any_change = false;
        for lane in 0..L {
            any_change |=
                numerators[lane] <= f64::EPSILON * (a_cur[lane] * b_mids[lane]).abs() && !done[lane];
            any_change |= b_cur[lane].abs() > BIG;
        }
        if any_change {
            for lane in 0..L {
                // Converged when |a₁ ⋯ a_n| / |B_n B_(n−1)| ≤ ε |A_n / B_n|.
                if done[lane] {
                    continue;
                }
                if numerators[lane] <= f64::EPSILON * (a_cur[lane] * b_mids[lane]).abs() {
                    done[lane] = true;
                } else if b_cur[lane].abs() > BIG {
                    a_prev[lane] *= SMALL;
                    a_cur[lane] *= SMALL;
                    b_prev[lane] *= SMALL;
                    b_cur[lane] *= SMALL;
                    numerators[lane] *= SMALL * SMALL;
                }
            }
            if done.iter().all(|&d| d) {
                break;
            }
        }
        k += 1.0;
    }
    std::array::from_fn(|lane| a_cur[lane] / b_cur[lane])
}

/// The continued fraction for I_x(a, b) (Numerical Recipes §6.4, eq. 6.4.5)
/// after the equivalence transformation that clears its denominators:
/// 1/(1 + d₁/(1 + d₂/(1 + …))) with d_n = a_n / ((a + n − 1)(a + n)) becomes
/// 1/(1 + a₁/((a + 1) + a₂/((a + 2) + …))), a₁ = −(a + b)x, a_2m = m(b − m)x
/// and a_(2m+1) = −(a + m)(a + b + m)x. Lanes as [`continued_fractions`].
fn beta_continued_fractions<const L: usize>(shapes: [BetaFraction; L]) -> [f64; L] {
    let fractions = continued_fractions([1.0; L], |k| {
        lanes_of(&shapes, |BetaFraction { p: a, q: b, v: x, .. }| {
            let m = k - 1.0;
            let odd = if k == 1.0 { -(a + b) * x } else { -(a + m) * ((a + b) + m) * x };
            let even = k * (b - k) * x;
            ((odd, a + 2.0 * k - 1.0), (even, a + 2.0 * k))
        })
    });
    lanes_of(&fractions, |fraction| 1.0 / fraction)
}

/// `f` of each lane, written as a plain loop that the compiler unrolls and
/// inlines (`array::map` was left as a call per lane).
#[inline(always)]
fn lanes_of<T: Copy, U: Copy + Default, const L: usize>(lanes: &[T; L], f: impl Fn(T) -> U) -> [U; L] {
    let mut out = [U::default(); L];
    for (o, &lane) in out.iter_mut().zip(lanes) {
        *o = f(lane);
    }
    out
}

/// Which tail of a Beta(a, b) law at x a continued fraction gives directly,
/// and the fraction's arguments: I_v(p, q) with w = 1 − v.
#[derive(Debug, Clone, Copy, PartialEq)]
struct BetaFraction {
    p: f64,
    q: f64,
    v: f64,
    w: f64,
}

/// A Beta law's tails at a point before its fraction is known: the kernel,
/// and which side the fraction gives.
#[derive(Debug, Clone, Copy)]
struct BetaSide {
    ln_kernel: f64,
    /// The fraction gives the lower tail (else the upper).
    lower_direct: bool,
    fraction: BetaFraction,
    /// ln p of the fraction's I_v(p, q).
    ln_p: f64,
}

impl BetaSide {
    /// The side of `law` at x (0 < x < 1, y = 1 − x) whose fraction
    /// converges: the lower tail below (a + 1)/(a + b + 2), else the upper.
    fn of(law: &BetaLaw, x: f64, y: f64) -> Self {
        let BetaLaw { a, b, .. } = *law;
        let ln_kernel = ln_beta_kernel_with(a, b, law.remainder, x, y);
        let lower_direct = x < (a + 1.0) / (a + b + 2.0);
        let (fraction, ln_p) = if lower_direct {
            (BetaFraction { p: a, q: b, v: x, w: y }, law.ln_a)
        } else {
            (BetaFraction { p: b, q: a, v: y, w: x }, law.ln_b)
        };
        BetaSide { ln_kernel, lower_direct, fraction, ln_p }
    }

    /// Whether the fraction is the plain one ([`beta_continued_fractions`],
    /// v ≤ ½) or the contracted one ([`contracted_beta_fractions`]).
    fn plain(&self) -> bool {
        self.fraction.v <= 0.5
    }

    /// The tails from the fraction's value.
    fn tails(&self, fraction: f64) -> Tails {
        let ln_kernel = self.ln_kernel;
        let direct = (ln_kernel - self.ln_p + fraction.ln()).exp().min(1.0);
        if self.lower_direct {
            Tails { lower: direct, upper: 1.0 - direct, ln_kernel }
        } else {
            Tails { lower: 1.0 - direct, upper: direct, ln_kernel }
        }
    }
}

/// The tails at 0 or 1 (None strictly inside).
fn beta_edge_tails(x: f64, y: f64) -> Option<Tails> {
    if x <= 0.0 {
        Some(Tails { lower: 0.0, upper: 1.0, ln_kernel: f64::NEG_INFINITY })
    } else if y <= 0.0 {
        Some(Tails { lower: 1.0, upper: 0.0, ln_kernel: f64::NEG_INFINITY })
    } else {
        None
    }
}

/// I_x(a, b) and 1 − I_x(a, b) for the Beta(a, b) distribution; `y` must be
/// 1 − x, computed by the caller without rounding where it can be.
pub fn beta_tails(a: f64, b: f64, x: f64, y: f64) -> Tails {
    if let Some(edge) = beta_edge_tails(x, y) {
        return edge;
    }
    let side = BetaSide::of(&BetaLaw::new(a, b), x, y);
    let fraction = if side.plain() {
        beta_continued_fractions([side.fraction])[0]
    } else {
        contracted_beta_fractions([side.fraction])[0]
    };
    side.tails(fraction)
}

/// Fractions run side by side in [`beta_tails_at`].
const LANES: usize = 4;

/// [`beta_tails`] of several Beta laws at one point x (y = 1 − x), in
/// `out`, each the same to the bit as alone. The fractions of the laws that
/// take the same one run [`LANES`] at a time side by side: on the 49 laws of
/// a corrected posterior, 12.8 µs for both interval ends against 17.9 µs
/// one law at a time (`cargo bench --bench quantiles -- "49 laws"`, medians).
pub fn beta_tails_at(laws: &[BetaLaw], x: f64, y: f64, out: &mut Vec<Tails>) {
    out.clear();
    if let Some(edge) = beta_edge_tails(x, y) {
        out.resize(laws.len(), edge);
        return;
    }
    let (sides, fractions) = fractions_at(laws, x, y);
    out.extend(sides.iter().zip(fractions).map(|(side, fraction)| side.tails(fraction)));
}

/// Each law's P(X ≤ x) and density at x (y = 1 − x), in `out`: the tails
/// of [`beta_tails_at`] formed from the kernel x^a y^b / B(a, b), which
/// the density shares, so one exponential serves both. The lower tail
/// agrees with [`beta_tails`] to a few ulps, not to the bit.
pub fn beta_lower_tails_and_densities_at(laws: &[BetaLaw], x: f64, y: f64, out: &mut Vec<[f64; 2]>) {
    out.clear();
    if let Some(edge) = beta_edge_tails(x, y) {
        out.resize(laws.len(), [edge.lower, 0.0]);
        return;
    }
    let (sides, fractions) = fractions_at(laws, x, y);
    out.extend(sides.iter().zip(fractions).map(|(side, fraction)| {
        let kernel = side.ln_kernel.exp();
        let direct = (kernel * fraction / side.fraction.p).min(1.0);
        let lower = if side.lower_direct { direct } else { 1.0 - direct };
        [lower, kernel / (x * y)]
    }));
}

/// The sides of `laws` at x, strictly inside (0, 1), and their fractions,
/// those of the laws that take the same fraction [`LANES`] at a time.
fn fractions_at(laws: &[BetaLaw], x: f64, y: f64) -> (Vec<BetaSide>, Vec<f64>) {
    let sides: Vec<BetaSide> = laws.iter().map(|law| BetaSide::of(law, x, y)).collect();
    let mut fractions = vec![0.0; sides.len()];
    for plain in [true, false] {
        let members: Vec<usize> = (0..sides.len()).filter(|&i| sides[i].plain() == plain).collect();
        for chunk in members.chunks(LANES) {
            // A short last chunk repeats its last law in the spare lanes.
            let lanes: [BetaFraction; LANES] =
                std::array::from_fn(|lane| sides[chunk[lane.min(chunk.len() - 1)]].fraction);
            let values =
                if plain { beta_continued_fractions(lanes) } else { contracted_beta_fractions(lanes) };
            for (&i, value) in chunk.iter().zip(values) {
                fractions[i] = value;
            }
        }
    }
    (sides, fractions)
}

/// The continued fraction of [`beta_continued_fractions`], 1/T with
/// T = 1 + d₁/(1 + d₂/(1 + …)), for v near 1, where each odd d_(2m+1) =
/// −(p + m)(p + q + m)v / ((p + 2m)(p + 2m + 1)) is near −1 when p is large
/// and 1 + d_(2m+1) would lose its digits (Beta(0.587, 6e11) at its upper
/// 2.5% point lost 11). It is contracted to its even part,
/// T = c₁ − d₁d₂/((c₃ + d₂) − d₃d₄/((c₅ + d₄) − …)), whose convergents are
/// the even ones of T, with c_(2m+1) = 1 + d_(2m+1) written in w = 1 − v:
/// ((2m + 1 − q)p + 3m² + (2 − q)m + (p + m)(p + q + m)w) / ((p + 2m)(p + 2m + 1)).
/// Lanes as [`continued_fractions`].
fn contracted_beta_fractions<const L: usize>(shapes: [BetaFraction; L]) -> [f64; L] {
    let odd = |BetaFraction { p, q, v, .. }: BetaFraction, m: f64| {
        -(p + m) * ((p + q) + m) * v / ((p + 2.0 * m) * (p + 2.0 * m + 1.0))
    };
    let even = |BetaFraction { p, q, v, .. }: BetaFraction, m: f64| {
        m * (q - m) * v / ((p + 2.0 * m - 1.0) * (p + 2.0 * m))
    };
    let one_plus_odd = |BetaFraction { p, q, w, .. }: BetaFraction, m: f64| {
        ((2.0 * m + 1.0 - q) * p + 3.0 * m * m + (2.0 - q) * m + (p + m) * ((p + q) + m) * w)
            / ((p + 2.0 * m) * (p + 2.0 * m + 1.0))
    };
    // Every term is scaled by s (numerators by s²), which scales T by s: the
    // terms are then of size 1 rather than 1/p, and the recurrence and the
    // product of numerators no longer underflow (for p = 6e11 they did after
    // a dozen levels, which stopped the fraction early).
    let scale = lanes_of(&shapes, |f| f.p + 1.0);
    // Level j ≥ 1: numerator −d_(2j−1) d_(2j), denominator c_(2j+1) + d_(2j).
    let level = |f: BetaFraction, j: f64| {
        let s = f.p + 1.0;
        (-odd(f, j - 1.0) * even(f, j) * s * s, (one_plus_odd(f, j) + even(f, j)) * s)
    };
    let first = lanes_of(&shapes, |f| one_plus_odd(f, 0.0) * (f.p + 1.0));
    let fractions =
        continued_fractions(first, |k| lanes_of(&shapes, |f| (level(f, 2.0 * k - 1.0), level(f, 2.0 * k))));
    let mut values = scale;
    for (value, fraction) in values.iter_mut().zip(fractions) {
        *value /= fraction;
    }
    values
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tails_side_by_side_are_those_of_each_law_alone_to_the_bit() {
        // Laws of every kind the fractions meet: small and huge shapes, whole
        // b (the fraction ends exactly), both sides of the switch point and
        // both fractions, in runs that leave short last chunks of lanes.
        let mut laws = Vec::new();
        for &a in &[0.05, 0.587, 1.0, 2.5, 18.3, 83.0, 400.5, 3.0e4, 6.0e11] {
            for &b in &[0.3, 1.0, 4.0, 12.0, 332.25, 2.0e5] {
                laws.push(BetaLaw::new(a, b));
            }
        }
        let mut side_by_side = Vec::new();
        for &x in &[1e-300, 1e-9, 0.003, 0.165, 0.2, 0.5, 0.76, 0.999, 1.0 - 1e-12] {
            let y = 1.0 - x;
            for take in [laws.len(), 49, 7, 1] {
                beta_tails_at(&laws[..take], x, y, &mut side_by_side);
                assert_eq!(side_by_side.len(), take);
                for (law, got) in laws.iter().zip(&side_by_side) {
                    let alone = beta_tails(law.a, law.b, x, y);
                    assert_eq!(
                        (got.lower.to_bits(), got.upper.to_bits(), got.ln_kernel.to_bits()),
                        (alone.lower.to_bits(), alone.upper.to_bits(), alone.ln_kernel.to_bits()),
                        "Beta({}, {}) at {x}",
                        law.a,
                        law.b
                    );
                }
            }
        }
        // With the density from the same kernel: the lower tail within a few
        // ulps of the law's alone, the density that of the textbook formula
        // x^(a−1) y^(b−1) / B(a, b), here in logs with statrs' ln Γ.
        let mut with_density = Vec::new();
        for &x in &[0.003, 0.165, 0.5, 0.76] {
            let y = 1.0 - x;
            beta_lower_tails_and_densities_at(&laws, x, y, &mut with_density);
            for (law, &[lower, density]) in laws.iter().zip(&with_density) {
                let alone = beta_tails(law.a, law.b, x, y).lower;
                // Relative where the tail is formed directly, a few ulps of 1
                // where it is one minus the other.
                assert!(
                    (lower - alone).abs() <= 1e-14 * alone + 1e-15,
                    "Beta({}, {}) at {x}: {lower} vs {alone}",
                    law.a,
                    law.b
                );
                if law.a < 1e5 && law.b < 1e5 {
                    let ln_beta = statrs::function::gamma::ln_gamma(law.a)
                        + statrs::function::gamma::ln_gamma(law.b)
                        - statrs::function::gamma::ln_gamma(law.a + law.b);
                    let textbook = ((law.a - 1.0) * x.ln() + (law.b - 1.0) * y.ln() - ln_beta).exp();
                    assert!(
                        (density - textbook).abs() <= 1e-9 * textbook + 1e-300,
                        "{density} vs {textbook}"
                    );
                }
            }
        }
        beta_tails_at(&laws, 0.0, 1.0, &mut side_by_side);
        assert!(side_by_side.iter().all(|t| t.lower == 0.0 && t.upper == 1.0));
        beta_tails_at(&laws, 1.0, 0.0, &mut side_by_side);
        assert!(side_by_side.iter().all(|t| t.lower == 1.0 && t.upper == 0.0));
    }

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
