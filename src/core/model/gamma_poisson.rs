//! The gamma-Poisson model for event rates with exposure.
//!
//! Group i has y_i events over exposure E_i (person-years, or expected counts
//! for standardised ratios); λ_i ~ Gamma(shape a, rate b) and
//! y_i | λ_i ~ Poisson(E_i λ_i), so y_i is negative binomial and the posterior
//! is Gamma(a + y_i, b + E_i). Prior mean μ = a/b, strength b, pool weight
//! B_i = b/(b + E_i).
//!
//! Working coordinates: u = (ln μ, ln a). With λ = Eμ and t = λ/a the log pmf
//! is ln Poisson(y; λ) + R(a, y) − a[ln(1+t) − t] − y ln(1+t), each extra term
//! vanishing as a → ∞, so the pmf tends to the Poisson smoothly.

use super::{
    point_mass_tails, CovariateTerms, Evaluation, Family, FunnelAxis, ModelTerms, PairFault, PlotTerms,
    Posterior, Prior, PriorFigure, PriorKey, PriorWords, RateLaw, RateRange, RawValue, Unidentifiable,
    ValueRule,
};
use crate::core::incomplete::{beta_tails, gamma_tails};
use crate::core::pairs::{PairTable, WeightedPair};
use crate::core::quantile::{gamma_quantile, Tail};
use crate::core::special::{
    ln_binomial_pmf_pq, ln_poisson_pmf, ln_rising_excess, log1p_minus, PolygammaBase,
};

/// The gamma-Poisson family (see the module docs).
#[derive(Debug, Clone, Copy, Default)]
pub struct GammaPoisson;

/// ln NegativeBinomial(y) of a Gamma(shape, rate) mixture of Poisson(E λ).
pub fn ln_pmf(y: f64, exposure: f64, shape: f64, rate: f64) -> f64 {
    log_pmf_at(y, exposure * shape / rate, shape, exposure / rate)
}

/// What every pair's terms share at one point u of a fit: μ, the shape a,
/// and ψ and ψ′ at a.
#[derive(Debug, Clone, Copy)]
pub struct GammaPoint {
    mu: f64,
    a: f64,
    at_a: PolygammaBase,
}

/// The log pmf from λ = Eμ, the shape a and t = λ/a = E/b.
///
/// For t ≤ 1 it is the Poisson log pmf plus terms that vanish as a → ∞; for
/// t > 1 (exposure beyond the prior's strength) that split would cancel terms
/// of size λ, so the binomial form below is used instead.
fn log_pmf_at(y: f64, lambda: f64, a: f64, t: f64) -> f64 {
    if t <= 1.0 {
        ln_poisson_pmf(y, lambda) + ln_rising_excess(a, y) - a * log1p_minus(t) - y * t.ln_1p()
    } else {
        // The negative binomial as a/(a + y) times a binomial pmf of a
        // "successes" in a + y trials with p = 1/(1 + t) (Loader 2000; the
        // form of R's dnbinom), every term small even for y near 1e12.
        let q = 1.0 / (1.0 + t);
        (a / (a + y)).ln() + ln_binomial_pmf_pq(a, a + y, q, t * q)
    }
}

impl Family for GammaPoisson {
    const TERMS: ModelTerms = ModelTerms {
        name: "gamma-poisson",
        count_role: "events",
        size_role: "exposure",
        count_rule: ValueRule::WholeCount,
        size_rule: ValueRule::Amount("exposure"),
        pair_fault: |size, count| {
            (size == 0.0 && count > 0.0)
                .then(|| PairFault::Size(format!("exposure is zero but there are {count} events")))
        },
        size_hint: |_, _, _| None,
        raw_value: RawValue::Ratio,
        parameter_names: ["shape", "inverse_scale"],
        raw_column: "raw_rate",
        degenerate_data: "zero events",
        rates: RateRange::NonNegative,
        mean_only_data: "the data say nothing about how much groups differ",
        overdispersion_test: "Dean",
        restricted_likelihood: false,
        grid_spacing: super::free::Spacing::SquareRoot,
        covariate_terms: CovariateTerms { link: "log", common_key: "shape", common_sign: 1.0 },
        law_of: |[shape, rate]| RateLaw::Gamma { shape, rate },
        prior_keys: &[
            PriorKey { key: "shape", figure: PriorFigure::Natural(0) },
            PriorKey { key: "rate", figure: PriorFigure::Natural(1) },
            PriorKey { key: "shape_se", figure: PriorFigure::NaturalSe(0) },
            PriorKey { key: "rate_se", figure: PriorFigure::NaturalSe(1) },
            PriorKey { key: "mean", figure: PriorFigure::Mean },
            PriorKey { key: "mean_se", figure: PriorFigure::MeanSe },
            PriorKey { key: "strength", figure: PriorFigure::Strength },
            PriorKey { key: "strength_se", figure: PriorFigure::StrengthSe },
        ],
        prior_words: PriorWords {
            law: "Gamma",
            terminal: &[("shape = ", "shape", false), ("rate = ", "rate", false)],
            page: &[("shape ", "shape"), ("rate ", "rate")],
        },
        plots: PlotTerms {
            raw_label: "raw rate (events / exposure)",
            size_noun: "exposure",
            funnel_noun: "exposure",
            funnel_axis: "exposure (log scale)",
            funnel_x: FunnelAxis::Size,
            unit_variance: |rate| rate,
        },
        local_prior: Some(super::neighbourhood::LocalPrior::gamma_prior),
    };

    type AtPoint = GammaPoint;

    fn at_point(u: [f64; 2]) -> GammaPoint {
        let (mu, a) = (u[0].exp(), u[1].exp());
        GammaPoint { mu, a, at_a: PolygammaBase::new(a) }
    }

    fn at_mean(at: &GammaPoint, u: [f64; 2]) -> GammaPoint {
        debug_assert_eq!(at.a.to_bits(), u[1].exp().to_bits());
        GammaPoint { mu: u[0].exp(), ..*at }
    }

    fn pair_terms_at(at: &GammaPoint, pair: &WeightedPair) -> Evaluation {
        let (exposure, y) = (pair.size, pair.count);
        if exposure == 0.0 {
            return Evaluation::default();
        }
        let GammaPoint { mu, a, at_a } = *at;
        let lambda = exposure * mu;
        let t = lambda / a;
        let q = 1.0 / (1.0 + t);
        let log_likelihood = log_pmf_at(y, lambda, a, t);
        let residual = y - lambda;
        let g1 = residual * q;
        let h11 = -(lambda + y * t) * q * q;
        let h12 = residual * t * q * q;
        // −a[ln(1+t) − t] and the terms beside it are regrouped for large t,
        // where each alone is of size λ and they cancel.
        let (g2, h22) = if t <= 1.0 {
            let excess = log1p_minus(t);
            (
                at_a.scaled_digamma_excess(y) - a * excess + residual * t * q,
                at_a.scaled_trigamma_excess(y) - a * excess - lambda * t * q - residual * t * q * q,
            )
        } else {
            // For t > 1 the excess forms are each of size y and cancel against
            // t(a + y)/(1 + t); the plain digamma difference, of size ln(y/a),
            // keeps the digits: g₂ = a[ψ(a+y) − ψ(a) − ln(1+t)] − (y − λ)q.
            let gap = at_a.digamma_diff(y) - t.ln_1p();
            (
                a * gap - residual * q,
                a * gap + a * a * at_a.trigamma_diff(y) + lambda * q - residual * q * (1.0 - q),
            )
        };
        Evaluation { log_likelihood, gradient: [g1, g2], hessian: [[h11, h12], [h12, h22]] }
    }

    fn rate_axes(rate: f64) -> [f64; 2] {
        [rate.ln(), rate]
    }

    fn pair_axes(exposure: f64, events: f64) -> [f64; 2] {
        [events, -exposure]
    }

    fn pooled_log_pmf(mean: f64, pair: &WeightedPair) -> f64 {
        ln_poisson_pmf(pair.count, pair.size * mean)
    }

    fn pooled_mean(table: &PairTable) -> f64 {
        let (exposure, events) = table.totals();
        events / exposure
    }

    fn pooled_mean_se(table: &PairTable, mean: f64) -> f64 {
        (mean / table.totals().0).sqrt()
    }

    fn check_identifiable(table: &PairTable) -> Result<(), Unidentifiable> {
        let (exposure, events) = table.totals();
        if exposure == 0.0 {
            return Err(Unidentifiable::NoData);
        }
        if events == 0.0 {
            return Err(Unidentifiable::DegenerateMean { mean: 0.0 });
        }
        Ok(())
    }

    fn boundary_score_term(mean: f64, pair: &WeightedPair) -> f64 {
        let d = pair.count - pair.size * mean;
        0.5 * (d * d - pair.count)
    }

    fn overdispersion_z(table: &PairTable, mean: f64) -> f64 {
        // Dean (1992), JASA 87:451, the score test of Poisson against the
        // negative binomial: Z = Σ[(y − λ)² − y] / sqrt(2 Σ λ²).
        let (mut num, mut den) = (0.0, 0.0);
        for p in table.pairs() {
            let lambda = p.size * mean;
            num += p.weight * ((p.count - lambda).powi(2) - p.count);
            den += p.weight * lambda * lambda;
        }
        if den <= 0.0 {
            return 0.0;
        }
        num / (2.0 * den).sqrt()
    }

    fn moment_strength(table: &PairTable, mean: f64) -> Option<f64> {
        // E Σ(y − λ)² = Σ(λ + λ²/a) for the negative binomial (common practice).
        let (mut num, mut den) = (0.0, 0.0);
        for p in table.pairs() {
            let lambda = p.size * mean;
            num += p.weight * ((p.count - lambda).powi(2) - p.count);
            den += p.weight * lambda * lambda;
        }
        let inverse_shape = num / den;
        if inverse_shape.is_nan() || inverse_shape <= 0.0 {
            return None;
        }
        Some(1.0 / (inverse_shape * mean))
    }

    fn working(mean: f64, strength: f64) -> [f64; 2] {
        [mean.ln(), (mean * strength).ln()]
    }

    fn mean_strength_of_natural([alpha, beta]: [f64; 2]) -> (f64, f64) {
        (alpha / beta, beta)
    }

    fn mean_strength(u: [f64; 2]) -> (f64, f64) {
        (u[0].exp(), (u[1] - u[0]).exp())
    }

    fn natural(u: [f64; 2]) -> [f64; 2] {
        [u[1].exp(), (u[1] - u[0]).exp()]
    }

    fn natural_jacobian(u: [f64; 2]) -> [[f64; 2]; 2] {
        let (a, b) = (u[1].exp(), (u[1] - u[0]).exp());
        [[0.0, a], [-b, b]]
    }

    fn mean_strength_jacobian(u: [f64; 2]) -> [[f64; 2]; 2] {
        let b = (u[1] - u[0]).exp();
        [[u[0].exp(), 0.0], [-b, b]]
    }

    fn rate_tails(prior: &Prior, exposure: f64, y: f64, threshold: f64) -> (f64, f64) {
        match *prior {
            Prior::CompletePooling { mean } => point_mass_tails(mean, threshold),
            Prior::Conjugate { natural: [shape, rate] } => {
                let tails = gamma_tails(shape + y, (rate + exposure) * threshold.max(0.0));
                (tails.lower, tails.upper)
            }
        }
    }

    fn predictive_cdf(prior: &Prior, exposure: f64, y: f64) -> (f64, f64) {
        match *prior {
            // Poisson(λ): P(Y ≤ y) = Q(y + 1, λ).
            Prior::CompletePooling { mean } => {
                let lambda = mean * exposure;
                let at_most = |y: f64| if y < 0.0 { 0.0 } else { gamma_tails(y + 1.0, lambda).upper };
                (at_most(y - 1.0), at_most(y))
            }
            // Negative binomial with a failures and success chance E/(b + E):
            // P(Y ≤ y) = I_{b/(b+E)}(a, y + 1).
            Prior::Conjugate { natural: [shape, rate] } => {
                let (p, q) = (rate / (rate + exposure), exposure / (rate + exposure));
                let at_most = |y: f64| if y < 0.0 { 0.0 } else { beta_tails(shape, y + 1.0, p, q).lower };
                (at_most(y - 1.0), at_most(y))
            }
        }
    }

    fn posterior_mean_gradient([shape, rate]: [f64; 2], exposure: f64, y: f64) -> [f64; 2] {
        // E = (a + y)/(b + E).
        let total = rate + exposure;
        [1.0 / total, -(shape + y) / (total * total)]
    }

    fn matched_interval(mean: f64, variance: f64, tail: f64) -> (f64, f64) {
        // Gamma(shape m²/v, rate m/v).
        let (shape, rate) = (mean * mean / variance, mean / variance);
        (gamma_quantile(shape, Tail::Lower, tail) / rate, gamma_quantile(shape, Tail::Upper, tail) / rate)
    }

    fn draw_count(rate: f64, exposure: f64, rng: &mut rand_chacha::ChaCha8Rng) -> f64 {
        use rand_distr::{Distribution, Poisson};
        let lambda = rate * exposure;
        if lambda <= 0.0 {
            return 0.0;
        }
        Poisson::new(lambda).map_or(lambda.round(), |d| d.sample(rng))
    }

    fn matched_tails(mean: f64, variance: f64, t: f64) -> (f64, f64) {
        let tails = gamma_tails(mean * mean / variance, mean / variance * t.max(0.0));
        (tails.lower, tails.upper)
    }

    fn raw_rate_variance(prior: &Prior, exposure: f64) -> f64 {
        match *prior {
            Prior::CompletePooling { mean } => mean / exposure,
            Prior::Conjugate { natural: [shape, rate] } => {
                let mean = shape / rate;
                mean / exposure + mean / rate
            }
        }
    }

    fn posterior_mean_sd(prior: &Prior, exposure: f64, y: f64) -> (f64, f64) {
        match *prior {
            Prior::CompletePooling { mean } => (mean, 0.0),
            Prior::Conjugate { natural: [shape, rate] } => {
                let (a, b) = (shape + y, rate + exposure);
                (a / b, a.sqrt() / b)
            }
        }
    }

    fn pool_weight(prior: &Prior, exposure: f64) -> f64 {
        match *prior {
            Prior::CompletePooling { .. } => 1.0,
            Prior::Conjugate { natural: [_, rate] } => rate / (rate + exposure),
        }
    }

    fn posterior_natural(prior: &Prior, exposure: f64, y: f64) -> Option<[f64; 2]> {
        match *prior {
            Prior::CompletePooling { .. } => None,
            Prior::Conjugate { natural: [shape, rate] } => Some([shape + y, rate + exposure]),
        }
    }

    fn posterior(prior: &Prior, exposure: f64, y: f64, tail: f64) -> Posterior {
        let ends = match *prior {
            Prior::CompletePooling { mean } => [mean; 2],
            Prior::Conjugate { natural: [shape, rate] } => {
                let (a, b) = (shape + y, rate + exposure);
                [gamma_quantile(a, Tail::Lower, tail) / b, gamma_quantile(a, Tail::Upper, tail) / b]
            }
        };
        Self::posterior_with_ends(prior, exposure, y, ends)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_point_made_from_one_of_the_same_strength_gives_the_same_bits() {
        super::super::assert_at_mean_matches::<GammaPoisson>(
            &[(2.5, 3.0), (0.01, 0.0), (400.0, 250.0), (1.0, 40.0)],
            &[[0.1, 0.5], [-1.0, 3.0], [0.5, -1.0]],
        );
    }

    #[test]
    fn derivatives_match_finite_differences() {
        super::super::assert_derivatives_match::<GammaPoisson>(
            &[(2.5, 3.0), (0.01, 0.0), (400.0, 250.0), (1.0, 40.0)],
            &[[0.1, 0.5], [-1.0, 3.0], [0.5, -1.0]],
        );
    }

    #[test]
    fn pmf_sums_to_one_and_reaches_the_poisson_limit() {
        let total: f64 = (0..400).map(|y| ln_pmf(f64::from(y), 3.0, 1.7, 0.4).exp()).sum();
        assert!((total - 1.0).abs() < 1e-12);
        // Gamma(a, a/μ) → point mass at μ as a → ∞, so the negative binomial tends
        // to the Poisson (common practice).
        let limit = ln_poisson_pmf(12.0, 2.0 * 4.5);
        assert!((ln_pmf(12.0, 2.0, 4.5e15, 1e15) - limit).abs() < 1e-11);
    }
}
