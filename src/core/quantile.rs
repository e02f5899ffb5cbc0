//! Quantiles of the Gamma and Beta distributions: the project's own inverse of
//! the regularised incomplete gamma and beta functions.
//!
//! Method: safeguarded Halley iteration on ln T(x) − ln p, where T is the tail
//! being inverted (the lower tail for the lower end of an interval, the upper
//! tail for the upper end, so the small probability is never formed as one
//! minus a number near one). The iteration runs in u = ln x for the gamma and
//! u = logit x for the beta, where ln T is close to linear far into the tails,
//! and keeps a bracket so a wild step falls back to bisection. Both derivatives
//! are closed-form from the density (no extra special functions), and the
//! iteration stops as soon as a step is so small that the cubic convergence
//! leaves an error far below the 1e-9 relative target, without one more
//! evaluation to confirm it. Starting points:
//! the small-x power law of each tail (DiDonato & Morris 1992, eq. 2 style
//! first approximations) for shapes below one, otherwise Wilson–Hilferty for the
//! gamma and a normal approximation in logit space for the beta.
//!
//! A quantile below the smallest positive double is returned as 0 (or as 1
//! for the beta's upper end), which is the correctly rounded value.

use crate::core::incomplete::{beta_tails, gamma_tails};
use crate::core::special::{digamma, ln_gamma, trigamma};

/// Which tail probability a quantile is asked for.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Tail {
    /// Find x with P(X ≤ x) = p.
    Lower,
    /// Find x with P(X > x) = p.
    Upper,
}

const MAX_ITERATIONS: usize = 200;
/// ln of the smallest positive subnormal double, below which x rounds to 0.
const LN_SMALLEST: f64 = -744.44;

/// Standard normal quantile, used only for starting values.
fn normal_quantile(p: f64) -> f64 {
    -std::f64::consts::SQRT_2 * statrs::function::erf::erfc_inv(2.0 * p)
}

/// A step in u this small ends the iteration: Halley's error after it is of
/// order curvature² · step³, far below the 1e-9 relative target in x.
const HALLEY_DONE: f64 = 1e-9;
/// The same for a plain Newton step, whose error is of order curvature · step².
const NEWTON_DONE: f64 = 1e-12;

/// What the iteration needs at a point: g, g′ and the curvature g″/g′.
struct Local {
    value: f64,
    slope: f64,
    curvature: f64,
}

/// Solves g(u) = 0 for g increasing in u, given g, g′ and g″/g′ at each point.
fn solve_increasing(mut u: f64, eval: impl Fn(f64) -> Local) -> f64 {
    let (mut lo, mut hi) = (f64::NEG_INFINITY, f64::INFINITY);
    let mut expand = 1.0;
    for _ in 0..MAX_ITERATIONS {
        let Local { value: g, slope, curvature } = eval(u);
        if g == 0.0 {
            return u;
        }
        if g > 0.0 {
            hi = u;
        } else {
            lo = u;
        }
        let newton = g / slope;
        let correction = 0.5 * newton * curvature;
        // Halley when its correction to Newton is moderate, else Newton.
        let (step, done) = if correction.abs() < 0.5 {
            (newton / (1.0 - correction), HALLEY_DONE)
        } else {
            (newton, NEWTON_DONE)
        };
        let proposal = u - step;
        let scale = u.abs().max(1.0);
        if proposal.is_finite() && step.abs() <= done * scale {
            // Converged: a step this small is trusted even where rounding puts
            // it on a bracket's edge (a step below one ulp leaves u unchanged).
            return proposal;
        }
        let next = if proposal.is_finite() && proposal > lo && proposal < hi {
            proposal
        } else if lo.is_finite() && hi.is_finite() {
            0.5 * (lo + hi)
        } else {
            expand *= 2.0;
            if g > 0.0 {
                u - expand
            } else {
                u + expand
            }
        };
        let moved = (next - u).abs();
        u = next;
        if moved <= 4.0 * f64::EPSILON * scale {
            return u;
        }
        if hi - lo <= 4.0 * f64::EPSILON * scale {
            return u;
        }
    }
    u
}

/// Quantile of Gamma(shape, rate 1) for the tail probability `p` in (0, 1).
pub fn gamma_quantile(shape: f64, tail: Tail, p: f64) -> f64 {
    let ln_p = p.ln();
    let p_lower = match tail {
        Tail::Lower => p,
        Tail::Upper => 1.0 - p,
    };
    let start = if shape < 1.0 && tail == Tail::Lower {
        // P(a, x) ≈ x^a / Γ(a + 1) for small x.
        let ln_x = (ln_p + ln_gamma(shape + 1.0)) / shape;
        if ln_x < LN_SMALLEST {
            return 0.0;
        }
        ln_x.min(0.0)
    } else {
        let z = normal_quantile(p_lower);
        let cube = 1.0 - 1.0 / (9.0 * shape) + z / (3.0 * shape.sqrt());
        if cube > 0.0 {
            (shape * cube * cube * cube).ln()
        } else {
            shape.ln()
        }
    };
    let sign = match tail {
        Tail::Lower => 1.0,
        Tail::Upper => -1.0,
    };
    let u = solve_increasing(start, |u| {
        let x = u.exp();
        let t = gamma_tails(shape, x);
        let mass = if tail == Tail::Lower { t.lower } else { t.upper };
        // d ln(kernel)/du = shape − x in u = ln x.
        local(sign, mass, ln_p, t.ln_kernel, shape - x)
    });
    u.exp()
}

/// g = ±(ln T − ln p) with its derivatives, from the tail mass T, the log
/// kernel (the density in u) and the kernel's log-derivative in u.
fn local(sign: f64, mass: f64, ln_p: f64, ln_kernel: f64, kernel_log_slope: f64) -> Local {
    if mass <= 0.0 {
        return Local { value: -sign * f64::INFINITY, slope: f64::NAN, curvature: f64::NAN };
    }
    let ln_mass = mass.ln();
    let slope = (ln_kernel - ln_mass).exp();
    // g″/g′ = d ln(kernel)/du ∓ g′ (lower tail −, upper tail +).
    Local { value: sign * (ln_mass - ln_p), slope, curvature: kernel_log_slope - sign * slope }
}

/// x and 1 − x from u = logit x, each without cancellation.
fn from_logit(u: f64) -> (f64, f64) {
    if u >= 0.0 {
        let e = (-u).exp();
        (1.0 / (1.0 + e), e / (1.0 + e))
    } else {
        let e = u.exp();
        (e / (1.0 + e), 1.0 / (1.0 + e))
    }
}

/// Quantile of Beta(a, b) for the tail probability `p` in (0, 1).
pub fn beta_quantile(a: f64, b: f64, tail: Tail, p: f64) -> f64 {
    let ln_p = p.ln();
    let ln_beta = ln_gamma(a) + ln_gamma(b) - ln_gamma(a + b);
    let p_lower = match tail {
        Tail::Lower => p,
        Tail::Upper => 1.0 - p,
    };
    let start = if a < 1.0 && tail == Tail::Lower {
        // I_x(a, b) ≈ x^a / (a B(a, b)) for small x.
        let ln_x = (ln_p + a.ln() + ln_beta) / a;
        if ln_x < LN_SMALLEST {
            return 0.0;
        }
        ln_x.min(-0.7)
    } else if b < 1.0 && tail == Tail::Upper {
        let ln_y = (ln_p + b.ln() + ln_beta) / b;
        if ln_y < LN_SMALLEST {
            return 1.0;
        }
        -ln_y.min(-0.7)
    } else {
        // logit of a Beta variable ≈ normal, mean ψ(a) − ψ(b), variance ψ′(a) + ψ′(b).
        digamma(a) - digamma(b) + normal_quantile(p_lower) * (trigamma(a) + trigamma(b)).sqrt()
    };
    let sign = match tail {
        Tail::Lower => 1.0,
        Tail::Upper => -1.0,
    };
    let u = solve_increasing(start, |u| {
        let (x, y) = from_logit(u);
        let t = beta_tails(a, b, x, y);
        let mass = if tail == Tail::Lower { t.lower } else { t.upper };
        // d ln(kernel)/du = a(1 − x) − b x in u = logit x.
        local(sign, mass, ln_p, t.ln_kernel, a * y - b * x)
    });
    from_logit(u).0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exponential_quantiles_are_exact() {
        // Gamma(1) = Exp(1): lower quantile −ln(1 − p), upper −ln p (textbook).
        for &p in &[1e-10, 0.025, 0.3] {
            let lower = gamma_quantile(1.0, Tail::Lower, p);
            assert!((lower - (-(-p).ln_1p())).abs() <= 1e-13 * lower);
            let upper = gamma_quantile(1.0, Tail::Upper, p);
            assert!((upper + p.ln()).abs() <= 1e-13 * upper);
        }
    }

    #[test]
    fn power_beta_quantiles_are_exact() {
        // Beta(a, 1) has CDF x^a, so its lower p-quantile is p^(1/a) (textbook).
        for &a in &[0.01, 0.5, 3.0, 400.0] {
            for &p in &[0.025, 0.5, 0.975] {
                let q = beta_quantile(a, 1.0, Tail::Lower, p);
                let exact = p.powf(1.0 / a);
                assert!((q - exact).abs() <= 1e-12 * exact, "a = {a}, p = {p}: {q} vs {exact}");
            }
        }
    }

    #[test]
    fn quantile_round_trips_through_the_cdf() {
        for &(a, b) in &[(0.5, 0.5), (2.0, 30.0), (3e4, 7e5)] {
            let x = beta_quantile(a, b, Tail::Upper, 0.025);
            let t = beta_tails(a, b, x, 1.0 - x);
            assert!((t.upper - 0.025).abs() < 1e-12, "a = {a}, b = {b}");
        }
    }

    #[test]
    fn quantiles_beyond_double_resolution_round_to_the_edge() {
        // Beta(0.05, 0.05): 1 − x at the upper 2.5% point is about 1e-26, so x
        // rounds to 1; the lower point is about 1e-26 itself and representable.
        assert_eq!(beta_quantile(0.05, 0.05, Tail::Upper, 0.025), 1.0);
        let lower = beta_quantile(0.05, 0.05, Tail::Lower, 0.025);
        assert!(lower > 0.0 && lower < 1e-20);
        // Gamma(0.001) lower 2.5% point is about 0.025^1000, below any double.
        assert_eq!(gamma_quantile(0.001, Tail::Lower, 0.025), 0.0);
    }
}
