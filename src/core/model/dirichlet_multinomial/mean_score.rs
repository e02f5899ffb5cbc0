//! The law of a weighted mean of Dirichlet shares: M = Σ s_k p_k for
//! p ~ Dirichlet(β₁, …, β_K) and fixed scores s_k (a seller's mean star
//! score under its posterior). Its CDF, density and quantiles, accurate to
//! about 1e-13 in probability.
//!
//! The shares are independent Gammas over their sum, p_k = G_k / Σ G_j with
//! G_k ~ Gamma(β_k, 1), so M ≤ t exactly when X = Σ (s_k − t) G_k ≤ 0: a
//! weighted sum of independent Gammas, whose moment generating function is
//! E e^{zX} = Π (1 − w_k z)^{−β_k}, w_k = s_k − t, in the strip where every
//! 1 − w_k Re z > 0. By the inversion integral along a vertical line Re z = c
//! in that strip (Lévy's formula for the Laplace transform of a step),
//!
//!   P(X > 0) =  (1/π) ∫₀^∞ Re[E e^{zX} / z] dy   for 0 < c,
//!   P(X < 0) = −(1/π) ∫₀^∞ Re[E e^{zX} / z] dy   for c < 0,   z = c + iy.
//!
//! The line is put through the saddle point of |E e^{zX}/z| on the side of
//! the smaller tail, so the integrand is positive and bell-shaped near y = 0
//! and the smaller tail comes out with relative accuracy. Its phase is
//! Σ β_k atan(·), bounded by π Σ β_k / 2, so it does not oscillate without
//! end; its modulus falls as y^{−Σβ−1}. The substitution y = σ sinh τ (σ the
//! saddle point's width) turns that algebraic fall into an exponential one,
//! and the trapezoidal rule in τ, halving its step until two steps agree,
//! converges geometrically (the integrand is analytic in a strip about the
//! real τ axis: Trefethen and Weideman, SIAM Review 56, 2014).
//!
//! The density of M at t comes from the same line:
//! f(t) = (1/π) ∫₀^∞ Re[E e^{zX} Σ_k β_k / (1 − w_k z)] dy, since
//! d/dt P(X_t ≤ 0) = E[S δ(X_t)] with S = Σ G_k, and E[S e^{zX}] is that
//! product.
//!
//! With two levels M is a scaled Beta share, and its tails and quantiles
//! are the Beta's (exact, and what the beta-binomial gives).

use crate::core::incomplete::{beta_tails, erfc, ln_beta_kernel};
use crate::core::quantile::{beta_quantile, Tail};

/// The trapezoidal rule's first step in τ.
const FIRST_STEP: f64 = 0.5;
/// Two successive steps agreeing to this, relative, end the halving: the
/// rule's error falls as exp(−c/h), so halving the step squares it, and
/// the finer of two sums that agree to 1e-4 is good to about 1e-8.
const AGREEMENT: f64 = 1e-4;
/// The fewest halvings (steps of 0.25 at least are taken).
const MIN_HALVINGS: u32 = 1;
/// The most halvings.
const MAX_HALVINGS: u32 = 9;
/// A term below this share of the sum, with the tail it bounds, ends a sweep.
const TAIL_SHARE: f64 = 1e-12;
/// Halley's search ends where its estimated error is below this many sds.
const ENOUGH: f64 = 1e-9;
/// The most points of one sweep.
const MAX_POINTS: usize = 200_000;

/// A mean score law: the Dirichlet shapes and the levels' scores.
#[derive(Debug, Clone, Copy)]
pub struct MeanScoreLaw<'a> {
    /// β_k > 0, one per level.
    pub shapes: &'a [f64],
    /// s_k, one per level, all different.
    pub scores: &'a [f64],
}

/// P(M ≤ t), P(M > t) and the density of M at t.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct AtThreshold {
    /// P(M ≤ t).
    pub lower: f64,
    /// P(M > t).
    pub upper: f64,
    /// The density of M at t.
    pub density: f64,
    /// The density's derivative at t.
    pub slope: f64,
}

impl MeanScoreLaw<'_> {
    /// E M.
    pub fn mean(&self) -> f64 {
        let total: f64 = self.shapes.iter().sum();
        self.shapes.iter().zip(self.scores).map(|(b, s)| b * s).sum::<f64>() / total
    }

    /// Var M = (Σ s² β/B − (E M)²) / (B + 1), B = Σ β (the Dirichlet's
    /// covariance, common practice), written about the mean to keep its digits.
    pub fn variance(&self) -> f64 {
        let total: f64 = self.shapes.iter().sum();
        let mean = self.mean();
        let spread: f64 = self.shapes.iter().zip(self.scores).map(|(b, s)| b * (s - mean).powi(2)).sum();
        spread / total / (total + 1.0)
    }

    /// Where the quantile search starts: the root of the saddlepoint
    /// approximation's tail ([`Self::saddlepoint_tail`]) by the secant method, from
    /// the Beta on the scores' range with M's mean and variance (that Beta
    /// alone where the approximation fails, near the mean). The saddlepoint
    /// start is usually within 1e-3 sd, so that Halley's first step ends the
    /// search; from the Beta it took a second evaluation of the integral.
    fn start(&self, tail: Tail, p: f64) -> f64 {
        let (lo, hi) = self.range();
        let width = hi - lo;
        let m = ((self.mean() - lo) / width).clamp(1e-12, 1.0 - 1e-12);
        let v = self.variance() / (width * width);
        let strength = (m * (1.0 - m) / v - 1.0).max(1e-6);
        let beta = lo + width * beta_quantile(m * strength, (1.0 - m) * strength, tail, p);
        self.saddlepoint_quantile(tail, p, beta).unwrap_or(beta)
    }

    /// The t where the saddlepoint approximation's tail is p, by the secant
    /// method from `from` to 1e-5 sd (the approximation is no closer than
    /// that); None where it fails (no finite tail, no bracket).
    fn saddlepoint_quantile(&self, tail: Tail, p: f64, from: f64) -> Option<f64> {
        let (lo, hi) = self.range();
        let sd = self.variance().sqrt();
        // The saddle point of the last threshold starts the next search.
        let mut saddle = 0.0;
        // Excess of the tail over p, rising with t.
        let mut excess = |t: f64| {
            let beyond = self.saddlepoint_tail(tail, t, &mut saddle)?;
            Some(match tail {
                Tail::Lower => beyond - p,
                Tail::Upper => p - beyond,
            })
        };
        let (mut t0, mut e0) = (from, excess(from)?);
        let mut t1 = (from - e0.signum() * 0.1 * sd).clamp(lo + 1e-9 * (hi - lo), hi - 1e-9 * (hi - lo));
        let mut e1 = excess(t1)?;
        for _ in 0..10 {
            if e1 == e0 {
                break;
            }
            let next = t1 - e1 * (t1 - t0) / (e1 - e0);
            if !(next > lo && next < hi) {
                return None;
            }
            if (next - t1).abs() <= 1e-5 * sd {
                return Some(next);
            }
            (t0, e0) = (t1, e1);
            t1 = next;
            e1 = excess(t1)?;
        }
        None
    }

    /// P(M ≤ t) (`Tail::Lower`) or P(M > t) (`Tail::Upper`) by the
    /// Lugannani–Rice saddlepoint approximation to X = Σ (s_k − t) G_k at 0
    /// (Lugannani and Rice, Adv. Appl. Prob. 12, 1980; Daniels, Int. Stat.
    /// Rev. 55, 1987): with K(s) = −Σ β_k ln(1 − w_k s) the cumulant
    /// generating function and K'(ŝ) = 0, ŵ = sign(ŝ) √(−2K(ŝ)),
    /// û = ŝ √K''(ŝ), P(X ≤ 0) ≈ Φ(ŵ) + φ(ŵ)(1/ŵ − 1/û), with Daniels'
    /// second-order terms. Its relative error falls as 1/(Σβ)²; it only
    /// starts the search. `saddle` holds ŝ, in and out (a start for the
    /// next threshold). None near the mean, where ŵ and û vanish together.
    fn saddlepoint_tail(&self, tail: Tail, t: f64, saddle: &mut f64) -> Option<f64> {
        let weights = || self.scores.iter().map(move |s| s - t);
        // K' rises from −∞ at the left edge of the strip to +∞ at the right.
        let (mut below, mut above) = (f64::NEG_INFINITY, f64::INFINITY);
        for w in weights() {
            if w > 0.0 {
                above = above.min(1.0 / w);
            } else if w < 0.0 {
                below = below.max(1.0 / w);
            }
        }
        // The first four derivatives of K at s: K^(j) = (j - 1)! Σ β r^j, r = w / (1 − w s).
        let slopes = |s: f64| {
            let mut k = [0.0; 4];
            for (b, w) in self.shapes.iter().zip(weights()) {
                let r = w / (1.0 - w * s);
                let r2 = r * r;
                k[0] += b * r;
                k[1] += b * r2;
                k[2] += 2.0 * b * r2 * r;
                k[3] += 6.0 * b * r2 * r2;
            }
            k
        };
        let start = if *saddle > below && *saddle < above { *saddle } else { 0.0 };
        let s = rising_root((below, above), start, (1e-10, 100), |s| {
            let [first, second, ..] = slopes(s);
            (first, second)
        });
        *saddle = s;
        let [_, second, third, fourth] = slopes(s);
        let k = cumulant_generating(self.shapes.iter().copied().zip(weights()), s);
        let w = s.signum() * (-2.0 * k).max(0.0).sqrt();
        let u = s * second.sqrt();
        if !(w.abs() > 1e-3 && u.is_finite() && u != 0.0) {
            return None;
        }
        // Daniels' second-order terms (as recalled from memory: a wrong term
        // would cost speed, not accuracy), in the standardised cumulants at ŝ.
        let (skew, kurtosis) = (third / second.powf(1.5), fourth / (second * second));
        let upper_terms = 1.0 / u - 1.0 / w + (kurtosis / 8.0 - 5.0 * skew * skew / 24.0) / u
            - skew / (2.0 * u * u)
            - 1.0 / (u * u * u)
            + 1.0 / (w * w * w);
        let correction = (-0.5 * w * w).exp() / (2.0 * std::f64::consts::PI).sqrt() * upper_terms;
        let beyond = match tail {
            Tail::Lower => 0.5 * erfc(-w / std::f64::consts::SQRT_2) - correction,
            Tail::Upper => 0.5 * erfc(w / std::f64::consts::SQRT_2) + correction,
        };
        (beyond > 0.0).then_some(beyond)
    }

    /// The lowest and highest score.
    fn range(&self) -> (f64, f64) {
        self.scores.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &s| (lo.min(s), hi.max(s)))
    }

    /// P(M ≤ t), P(M > t) and the density at t.
    pub fn at(&self, t: f64) -> AtThreshold {
        let (lo, hi) = self.range();
        if t <= lo {
            return AtThreshold { lower: 0.0, upper: 1.0, density: 0.0, slope: 0.0 };
        }
        if t >= hi {
            return AtThreshold { lower: 1.0, upper: 0.0, density: 0.0, slope: 0.0 };
        }
        if let Some(share) = self.as_beta() {
            return share.at(t);
        }
        self.by_inversion(t)
    }

    /// Two levels: M = s₁ + (s₂ − s₁) p₂ with p₂ ~ Beta(β₂, β₁).
    fn as_beta(&self) -> Option<BetaShare> {
        match (self.shapes, self.scores) {
            ([b1, b2], [s1, s2]) if s2 > s1 => Some(BetaShare { a: *b2, b: *b1, from: *s1, width: s2 - s1 }),
            ([b1, b2], [s1, s2]) => Some(BetaShare { a: *b1, b: *b2, from: *s2, width: s1 - s2 }),
            _ => None,
        }
    }

    /// [`Self::at`] by the inversion integral, t strictly inside the scores' range.
    fn by_inversion(&self, t: f64) -> AtThreshold {
        let line = Line::through_saddle(self, t);
        let Sums { tail, density, slope } = line.integrate();
        if line.c > 0.0 {
            AtThreshold { lower: 1.0 - tail, upper: tail, density, slope }
        } else {
            AtThreshold { lower: tail, upper: 1.0 - tail, density, slope }
        }
    }

    /// The t with P(M ≤ t) = p (`Tail::Lower`) or P(M > t) = p (`Tail::Upper`),
    /// p in (0, 1). Halley's method from the saddlepoint start ([`Self::start`]),
    /// kept in a bracket. Its error after a step of d is about
    /// C d³ with C of the order of (f'/f)², so it stops when, with d the
    /// longer of Halley's and Newton's steps,
    /// (d/sd)³ max(1, (sd f'/f)²) is below [`ENOUGH`]: near the normal
    /// shape that is a step of about 6e-4 sd, usually the first; where the
    /// density bends sharply (tiny shapes) the search goes on. The CDF's own
    /// error (about 1e-10 in probability) bounds the rest.
    pub fn quantile(&self, tail: Tail, p: f64) -> f64 {
        if let Some(share) = self.as_beta() {
            return share.quantile(tail, p);
        }
        self.quantile_from(tail, p, self.start(tail, p))
    }

    /// [`Self::quantile`]'s search from `t`.
    fn quantile_from(&self, tail: Tail, p: f64, mut t: f64) -> f64 {
        let (lo, hi) = self.range();
        let width = hi - lo;
        let sd = self.variance().sqrt();
        let (mut below, mut above) = (lo, hi);
        for _ in 0..100 {
            let at = self.at(t);
            // Mass beyond t on the asked side, less p: positive means t is too far in.
            let excess = match tail {
                Tail::Lower => at.lower - p,
                Tail::Upper => p - at.upper,
            };
            if excess > 0.0 {
                above = t;
            } else {
                below = t;
            }
            // Halley's step: the excess rises with slope f and curvature f'.
            let (f, curvature) = (at.density, at.slope);
            let denominator = 2.0 * f * f - excess * curvature;
            let newton =
                if f > 0.0 && denominator > 0.0 { t - 2.0 * excess * f / denominator } else { f64::NAN };
            // Far out in a tail Halley's step is short while Newton's is not:
            // the longer of the two is the distance to judge.
            let step = (newton - t).abs().max(excess.abs() / f);
            let bend = (sd * curvature / f).powi(2).max(1.0);
            if (step / sd).powi(3) * bend <= ENOUGH || step <= 1e-13 * width {
                return newton.clamp(below, above);
            }
            // Far out in a tail, where Halley's step is a small part of
            // Newton's, Newton's step on the log of the tail (nearly linear
            // there); the step where it stays inside the bracket, else halve it.
            let beyond = if tail == Tail::Lower { at.lower } else { -at.upper };
            let next = if (newton - t).abs() < 0.1 * excess.abs() / f {
                t - (beyond.abs().ln() - p.ln()) * beyond / f
            } else {
                newton
            };
            let next = if next > below && next < above { next } else { 0.5 * (below + above) };
            if above - below <= 1e-13 * width {
                return next;
            }
            t = next;
        }
        t
    }
}

/// M as a scaled Beta: from + width · Beta(a, b).
struct BetaShare {
    a: f64,
    b: f64,
    from: f64,
    width: f64,
}

impl BetaShare {
    /// Tails and density at t inside (from, from + width); the slope is not
    /// needed (quantiles are the Beta's own) and is left at 0.
    fn at(&self, t: f64) -> AtThreshold {
        let x = (t - self.from) / self.width;
        let y = 1.0 - x;
        let tails = beta_tails(self.a, self.b, x, y);
        let density = ln_beta_kernel(self.a, self.b, x, y).exp() / (x * y * self.width);
        AtThreshold { lower: tails.lower, upper: tails.upper, density, slope: 0.0 }
    }

    /// The Beta's own quantile, on the scores' scale.
    fn quantile(&self, tail: Tail, p: f64) -> f64 {
        self.from + self.width * beta_quantile(self.a, self.b, tail, p)
    }
}

/// K(s) = −Σ β ln(1 − w s), the cumulant generating function of Σ w G
/// with G ~ Gamma(β, 1), from its (β, w) pairs.
fn cumulant_generating(terms: impl Iterator<Item = (f64, f64)>, s: f64) -> f64 {
    -terms.map(|(b, w)| b * (-w * s).ln_1p()).sum::<f64>()
}

/// The root in (below, above) of a function that rises across it, from
/// `start`: Newton's method, a step that would leave the bracket halving
/// it instead, until a step is within `tolerance` of the point, relative,
/// or after `iterations`. `slopes` gives the function and its derivative.
fn rising_root(
    (mut below, mut above): (f64, f64),
    start: f64,
    (tolerance, iterations): (f64, usize),
    slopes: impl Fn(f64) -> (f64, f64),
) -> f64 {
    let mut x = start;
    for _ in 0..iterations {
        let (value, slope) = slopes(x);
        if value > 0.0 {
            above = x;
        } else {
            below = x;
        }
        let mut next = x - value / slope;
        if !(next > below && next < above) {
            next = 0.5 * (below + above);
        }
        let done = (next - x).abs() <= tolerance * x.abs().max(1e-300);
        x = next;
        if done {
            break;
        }
    }
    x
}

/// The line Re z = c the inversion integral runs along, with what the
/// integrand needs at each point.
struct Line<'a> {
    law: &'a MeanScoreLaw<'a>,
    /// w_k = s_k − t.
    weights: Vec<f64>,
    /// c.
    c: f64,
    /// The saddle point's width: 1 / √(d²/dc² of ln(E e^{cX} / |c|)).
    sigma: f64,
    /// ln E e^{cX}.
    ln_mgf_at_c: f64,
    /// Σ β_k over the levels whose w_k is not 0: the modulus falls as y to minus this.
    decay: f64,
}

impl<'a> Line<'a> {
    /// The line through the saddle point of ln E e^{cX} − ln |c| on the
    /// side of the smaller tail: c > 0 (P(X > 0)) when E X < 0, else c < 0.
    fn through_saddle(law: &'a MeanScoreLaw<'a>, t: f64) -> Self {
        let weights: Vec<f64> = law.scores.iter().map(|s| s - t).collect();
        let mean_x: f64 = law.shapes.iter().zip(&weights).map(|(b, w)| b * w).sum();
        let side = if mean_x < 0.0 { 1.0 } else { -1.0 };
        // The strip's edge on that side: 1 / (the largest w with the side's sign).
        let edge = weights
            .iter()
            .filter(|w| **w * side > 0.0)
            .map(|w| 1.0 / w)
            .fold(f64::INFINITY * side, |e, x| if side > 0.0 { e.min(x) } else { e.max(x) });
        let derivatives = |c: f64| {
            let (mut first, mut second) = (-1.0 / c, 1.0 / (c * c));
            for (b, w) in law.shapes.iter().zip(&weights) {
                let r = w / (1.0 - w * c);
                first += b * r;
                second += b * r * r;
            }
            (first, second)
        };
        // h'(c) rises across the bracket between 0 and the edge (from −∞ to
        // the other sign, or to +∞): Newton's search kept in it, to a few
        // digits (the integral is exact on any line in the strip; the saddle
        // only makes it quick).
        let bracket = if side > 0.0 { (0.0, edge) } else { (edge, 0.0) };
        let c = rising_root(bracket, 0.5 * edge, (1e-6, 60), derivatives);
        let (_, second) = derivatives(c);
        let ln_mgf_at_c = cumulant_generating(law.shapes.iter().copied().zip(weights.iter().copied()), c);
        let decay = law.shapes.iter().zip(&weights).filter(|(_, w)| **w != 0.0).map(|(b, _)| b).sum();
        Line { law, weights, c, sigma: 1.0 / second.sqrt(), ln_mgf_at_c, decay }
    }

    /// The integrands at τ (each times dy/dτ, relative to E e^{cX}) and a
    /// bound on their moduli.
    fn at(&self, tau: f64) -> (Sums, f64) {
        let y = self.sigma * tau.sinh();
        let jacobian = self.sigma * tau.cosh();
        let (mut ln_modulus, mut phase) = (0.0, 0.0);
        // D = Σ β/(1 − w z) and D₂ = Σ β/(1 − w z)², as (real, imaginary).
        let (mut d, mut d2, mut modulus_bound) = ((0.0, 0.0), (0.0, 0.0), 0.0);
        for (b, w) in self.law.shapes.iter().zip(&self.weights) {
            // 1 − w z = a + i q.
            let a = 1.0 - w * self.c;
            let q = -w * y;
            let ratio = q / a;
            ln_modulus -= 0.5 * b * (ratio * ratio).ln_1p();
            phase -= b * ratio.atan();
            let norm = a * a + q * q;
            let (re, im) = (a / norm, -q / norm);
            d.0 += b * re;
            d.1 += b * im;
            d2.0 += b * (re * re - im * im);
            d2.1 += b * 2.0 * re * im;
            modulus_bound += b / norm.sqrt();
        }
        let modulus = ln_modulus.exp() * jacobian;
        let (sin, cos) = phase.sin_cos();
        let m = (modulus * cos, modulus * sin);
        let z_norm = self.c * self.c + y * y;
        // Re[M / z], Re[M D] and −Re[z M (D² + D₂)].
        let tail = (m.0 * self.c + m.1 * y) / z_norm;
        let density = m.0 * d.0 - m.1 * d.1;
        let square = (d.0 * d.0 - d.1 * d.1 + d2.0, 2.0 * d.0 * d.1 + d2.1);
        let zm = (self.c * m.0 - y * m.1, self.c * m.1 + y * m.0);
        let slope = -(zm.0 * square.0 - zm.1 * square.1);
        let bound = modulus * (1.0 / z_norm.sqrt()).max(modulus_bound);
        (Sums { tail, density, slope }, bound)
    }

    /// Σ over τ = (first + j·every)·step, j = 0, 1, …, of the integrands,
    /// until a term and the tail it bounds are negligible.
    fn sweep(&self, step: f64, first: f64, every: f64) -> Sums {
        let mut sums = Sums::default();
        // Beyond τ the terms fall at least as e^{−decay·τ}; the tail past a
        // term is at most the term over (1 − e^{−decay·gap}).
        let gap = every * step;
        let tail_factor = (1.0 / (-(-self.decay * gap).exp_m1()).max(1e-300)).min(1e12);
        for j in 0..MAX_POINTS {
            let tau = (first + j as f64 * every) * step;
            let (terms, bound) = self.at(tau);
            sums.add(&terms, 1.0);
            let scale = sums.tail.abs().max(sums.density.abs() * self.sigma).max(1e-300);
            if bound * tail_factor < TAIL_SHARE * scale || bound == 0.0 {
                break;
            }
        }
        sums
    }

    /// The smaller tail, the density and its slope at t, by the trapezoidal
    /// rule in τ with the step halved until two steps agree.
    fn integrate(&self) -> Sums {
        let mut step = FIRST_STEP;
        let (centre, _) = self.at(0.0);
        let mut total = Sums::default();
        total.add(&centre, 0.5);
        total.add(&self.sweep(step, 1.0, 1.0), 1.0);
        let mut estimate = total.scaled(step);
        for halving in 1..=MAX_HALVINGS {
            step *= 0.5;
            // The new points sit halfway between the old ones.
            total.add(&self.sweep(step, 1.0, 2.0), 1.0);
            let next = total.scaled(step);
            let agreed = (next.tail - estimate.tail).abs() <= AGREEMENT * next.tail.abs()
                && (next.density - estimate.density).abs() <= AGREEMENT * next.density.abs();
            estimate = next;
            if agreed && halving >= MIN_HALVINGS {
                break;
            }
        }
        let scale = self.ln_mgf_at_c.exp() / std::f64::consts::PI;
        Sums {
            tail: (estimate.tail * scale * self.c.signum()).clamp(0.0, 1.0),
            density: (estimate.density * scale).max(0.0),
            slope: estimate.slope * scale,
        }
    }
}

/// The three integrals, or their integrands at a point.
#[derive(Debug, Clone, Copy, Default)]
struct Sums {
    tail: f64,
    density: f64,
    slope: f64,
}

impl Sums {
    fn add(&mut self, other: &Sums, weight: f64) {
        self.tail += weight * other.tail;
        self.density += weight * other.density;
        self.slope += weight * other.slope;
    }

    fn scaled(&self, factor: f64) -> Sums {
        Sums { tail: self.tail * factor, density: self.density * factor, slope: self.slope * factor }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn two_levels_by_inversion_give_the_beta_law() {
        // With scores (0, 1), M is the second share: Beta(β₂, β₁) (common practice);
        // the inversion integral, which K > 2 needs, is held to the CDF's stated accuracy.
        for &(b1, b2) in &[(0.3, 0.7), (2.0, 5.0), (40.0, 900.0), (1e4, 3.0)] {
            let shapes = [b1, b2];
            let law = MeanScoreLaw { shapes: &shapes, scores: &[0.0, 1.0] };
            for &x in &[1e-3, 0.1, 0.5, 0.9, 0.999] {
                let at = law.by_inversion(x);
                let exact = beta_tails(b2, b1, x, 1.0 - x);
                assert_eq!(law.at(x).lower, exact.lower);
                assert!(
                    (at.lower - exact.lower).abs() <= 1e-14 + 1e-9 * exact.lower,
                    "β = {shapes:?}, x = {x}: {} vs {}",
                    at.lower,
                    exact.lower
                );
                assert!((at.upper - exact.upper).abs() <= 1e-14 + 1e-9 * exact.upper);
                let density = ln_beta_kernel(b2, b1, x, 1.0 - x).exp() / (x * (1.0 - x));
                assert!((law.at(x).density - density).abs() <= 1e-12 * density);
                assert!((at.density - density).abs() <= 1e-8 * density, "{} vs {density}", at.density);
            }
        }
    }

    #[test]
    fn quantiles_hold_the_interval_bar_over_the_range_a_user_reaches() {
        // From a seller with no ratings under a weak prior to a million
        // ratings, even, skewed to either end, and tiny shapes: the quantile's
        // error on the score scale, (F(q) − p) / f(q), is within 1e-8 (the
        // CDF itself is checked against mpmath in tests/integration/levels.rs).
        let scores = [1.0, 2.0, 3.0, 4.0, 5.0];
        let profiles = [
            [0.2f64, 0.2, 0.2, 0.2, 0.2],
            [0.0, 0.0, 0.0, 0.02, 0.98],
            [0.9, 0.05, 0.0, 0.0, 0.05],
            [0.0, 0.0, 1.0, 0.0, 0.0],
        ];
        for prior in
            [[0.05, 0.02, 0.1, 0.3, 0.2], [0.5, 0.3, 0.6, 2.0, 6.6], [40.0, 30.0, 60.0, 200.0, 660.0]]
        {
            for n in [0.0f64, 1.0, 3.0, 10.0, 40.0, 200.0, 1e3, 1e4, 1e6] {
                for profile in &profiles {
                    let shapes: Vec<f64> = (0..5).map(|k| prior[k] + (n * profile[k]).round()).collect();
                    let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
                    for &p in &[1e-4, 0.025, 0.5] {
                        for tail in [Tail::Lower, Tail::Upper] {
                            // From the saddlepoint start, and from starts far out in either tail.
                            for start in [None, Some(1.08), Some(2.2), Some(4.88)] {
                                let q = match start {
                                    None => law.quantile(tail, p),
                                    Some(t) => law.quantile_from(tail, p, t),
                                };
                                let at = law.at(q);
                                let got = if tail == Tail::Lower { at.lower } else { at.upper };
                                let error = (got - p).abs() / at.density;
                                assert!(
                                    error <= 1e-8,
                                    "{shapes:?}, {tail:?} {p} from {start:?}: {q}, F off by {} (score {error})",
                                    got - p
                                );
                            }
                        }
                    }
                }
            }
        }
    }

    #[test]
    fn the_density_is_the_slope_of_the_cdf() {
        let shapes = [0.8, 2.5, 4.0, 30.0, 12.0];
        let law = MeanScoreLaw { shapes: &shapes, scores: &[1.0, 2.0, 3.0, 4.0, 5.0] };
        for &t in &[1.5, 3.2, 3.9, 4.4, 4.95] {
            let h = 1e-5;
            let slope = (law.at(t + h).lower - law.at(t - h).lower) / (2.0 * h);
            let density = law.at(t).density;
            assert!((slope - density).abs() <= 1e-6 * density.max(1e-3), "t = {t}: {slope} vs {density}");
        }
    }

    #[test]
    fn the_slope_is_the_derivative_of_the_density() {
        let shapes = [0.8, 2.5, 4.0, 30.0, 12.0];
        let law = MeanScoreLaw { shapes: &shapes, scores: &[1.0, 2.0, 3.0, 4.0, 5.0] };
        for &t in &[2.5, 3.9, 4.2, 4.6] {
            let h = 1e-5;
            let slope = (law.at(t + h).density - law.at(t - h).density) / (2.0 * h);
            let got = law.at(t).slope;
            assert!((slope - got).abs() <= 1e-5 * got.abs().max(1e-2), "t = {t}: {slope} vs {got}");
        }
    }

    #[test]
    fn quantiles_invert_the_cdf() {
        let shapes = [0.2, 0.1, 0.5, 3.0, 9.0];
        let law = MeanScoreLaw { shapes: &shapes, scores: &[1.0, 2.0, 3.0, 4.0, 5.0] };
        for &p in &[1e-6, 0.025, 0.5, 0.975] {
            let t = law.quantile(Tail::Lower, p);
            assert!((law.at(t).lower - p).abs() <= 1e-11, "p = {p}");
            let t = law.quantile(Tail::Upper, p);
            assert!((law.at(t).upper - p).abs() <= 1e-11, "p = {p}");
        }
    }
}
