//! The normal-normal model for estimates with known standard errors.
//!
//! Group i reports an estimate y_i with standard error s_i (a store's mean
//! rating, a clinic's mean waiting time, a study's effect size);
//! θ_i ~ N(μ, τ²) and y_i | θ_i ~ N(θ_i, s_i²), so y_i ~ N(μ, s_i² + τ²) and
//! the posterior is N(B_i μ + (1 − B_i) y_i, (1 − B_i) s_i²) with pool weight
//! B_i = s_i² / (s_i² + τ²). The prior mean is μ and the strength the prior
//! precision 1/τ²; "no overdispersion" is τ² = 0 (φ = 1/strength = τ²).
//!
//! In the pair table the size is s_i and the count y_i. Working coordinates:
//! u = (μ, ln(1/τ²)). Every term tends smoothly to its τ² = 0 limit, where the
//! score in u₂ vanishes like τ².
//!
//! Restricted maximum likelihood (`--variance-method reml`) maximises the
//! marginal likelihood plus the whole-table term −½ ln Σ 1/(s_i² + τ²) (the
//! log determinant of the information on μ, with ½ ln 2π): as that term does
//! not depend on μ, the joint maximum over (μ, τ²) is the usual REML
//! estimate of τ² with μ at its weighted mean (Harville, JASA 1977).

use super::{
    CovariateTerms, Evaluation, Family, FunnelAxis, ModelTerms, PlotTerms, Posterior, Prior, PriorFigure,
    PriorKey, PriorWords, RateLaw, RateRange, RawValue, Unidentifiable, ValueRule,
};
use crate::core::incomplete::erfc;
use crate::core::pairs::{PairTable, WeightedPair};
use crate::core::quantile::{gamma_quantile, Tail};
use std::f64::consts::{PI, SQRT_2};

/// The normal-normal family (see the module docs).
#[derive(Debug, Clone, Copy, Default)]
pub struct NormalNormal;

/// ln of the N(mean, variance) density at x.
fn ln_normal_density(x: f64, mean: f64, variance: f64) -> f64 {
    let r = x - mean;
    -0.5 * ((2.0 * PI * variance).ln() + r * r / variance)
}

/// The standard normal quantile of the upper tail `p` ≤ ½, from the gamma
/// quantile: Φ̄(z) = ½ Q(½, z²/2), so z = √(2 Q⁻¹(½, 2p)).
fn upper_normal_quantile(p: f64) -> f64 {
    (2.0 * gamma_quantile(0.5, Tail::Upper, 2.0 * p)).sqrt()
}

/// (P(X < t), P(X > t)) for X ~ N(mean, sd²), each tail formed directly.
fn normal_tails(mean: f64, sd: f64, t: f64) -> (f64, f64) {
    let z = (t - mean) / (sd * SQRT_2);
    (0.5 * erfc(-z), 0.5 * erfc(z))
}

/// The equal-tailed interval of N(mean, sd²) leaving `tail` in each tail.
fn normal_interval(mean: f64, sd: f64, tail: f64) -> (f64, f64) {
    let z = upper_normal_quantile(tail);
    (mean - z * sd, mean + z * sd)
}

/// The weighted sums Σ w/V^k, k = 1, 2, 3, with V = s² + τ².
fn precision_sums(table: &PairTable, tau2: f64) -> [f64; 3] {
    let mut sums = [0.0; 3];
    for p in table.pairs() {
        let inverse = 1.0 / (p.size * p.size + tau2);
        sums[0] += p.weight * inverse;
        sums[1] += p.weight * inverse * inverse;
        sums[2] += p.weight * inverse * inverse * inverse;
    }
    sums
}

impl Family for NormalNormal {
    const TERMS: ModelTerms = ModelTerms {
        name: "normal-normal",
        count_role: "estimate",
        size_role: "std-error",
        count_rule: ValueRule::Finite,
        size_rule: ValueRule::Scale("standard error"),
        pair_fault: |_, _| None,
        size_hint: |_, _, _| None,
        raw_value: RawValue::Count,
        parameter_names: ["mean", "variance"],
        raw_column: "raw_estimate",
        degenerate_data: "estimates",
        rates: RateRange::Real,
        mean_only_data: "there is only one group, so nothing says how much groups differ",
        overdispersion_test: "score test for tau^2 = 0",
        restricted_likelihood: true,
        grid_spacing: super::free::Spacing::Linear,
        covariate_terms: CovariateTerms { link: "identity", common_key: "variance", common_sign: -1.0 },
        law_of: |[mean, variance]| RateLaw::Normal { mean, sd: variance.sqrt() },
        prior_keys: &[
            PriorKey { key: "mean", figure: PriorFigure::MeanAndNatural(0) },
            PriorKey { key: "mean_se", figure: PriorFigure::MeanSe },
            PriorKey { key: "variance", figure: PriorFigure::NaturalOrZero(1) },
            PriorKey { key: "variance_se", figure: PriorFigure::NaturalSe(1) },
            PriorKey { key: "strength", figure: PriorFigure::Strength },
            PriorKey { key: "strength_se", figure: PriorFigure::StrengthSe },
        ],
        prior_words: PriorWords {
            law: "Normal",
            terminal: &[("mean = ", "mean", false), ("variance = ", "variance", true)],
            page: &[("mean ", "mean"), ("variance ", "variance")],
        },
        plots: PlotTerms {
            raw_label: "estimate",
            size_noun: "standard error",
            funnel_noun: "precision (1/se²)",
            funnel_axis: "precision 1/se² (log scale)",
            funnel_x: FunnelAxis::Precision,
            unit_variance: |_| 1.0,
        },
        local_prior: None,
    };

    type AtPoint = [f64; 2];

    fn at_point(u: [f64; 2]) -> [f64; 2] {
        u
    }

    fn pair_terms_at(&u: &[f64; 2], pair: &WeightedPair) -> Evaluation {
        let (s2, r) = (pair.size * pair.size, pair.count - u[0]);
        let tau2 = (-u[1]).exp();
        let v = s2 + tau2;
        // ∂ℓ/∂V and ∂²ℓ/∂V², with V = s² + τ² and ∂V/∂u₂ = −τ², ∂²V/∂u₂² = τ².
        let d_v = 0.5 * (r * r / v - 1.0) / v;
        let dd_v = (0.5 - r * r / v) / (v * v);
        let h12 = r * tau2 / (v * v);
        Evaluation {
            log_likelihood: ln_normal_density(pair.count, u[0], v),
            gradient: [r / v, -tau2 * d_v],
            hessian: [[-1.0 / v, h12], [h12, dd_v * tau2 * tau2 + d_v * tau2]],
        }
    }

    fn rate_axes(mean: f64) -> [f64; 2] {
        [mean, mean * mean]
    }

    fn pair_axes(se: f64, estimate: f64) -> [f64; 2] {
        let precision = 1.0 / (se * se);
        [estimate * precision, -0.5 * precision]
    }

    fn pooled_log_pmf(mean: f64, pair: &WeightedPair) -> f64 {
        ln_normal_density(pair.count, mean, pair.size * pair.size)
    }

    fn pooled_mean(table: &PairTable) -> f64 {
        let (mut sum, mut weights) = (0.0, 0.0);
        for p in table.pairs() {
            let w = p.weight / (p.size * p.size);
            sum += w * p.count;
            weights += w;
        }
        sum / weights
    }

    fn pooled_mean_se(table: &PairTable, _mean: f64) -> f64 {
        1.0 / precision_sums(table, 0.0)[0].sqrt()
    }

    fn check_identifiable(table: &PairTable) -> Result<(), Unidentifiable> {
        match table.groups() {
            0.0 => Err(Unidentifiable::NoData),
            g if g < 2.0 => Err(Unidentifiable::MeanOnly { mean: Self::pooled_mean(table) }),
            _ => Ok(()),
        }
    }

    fn boundary_score_term(mean: f64, pair: &WeightedPair) -> f64 {
        // ∂ℓ/∂τ² at τ² = 0.
        let (s2, r) = (pair.size * pair.size, pair.count - mean);
        0.5 * (r * r - s2) / (s2 * s2)
    }

    fn overdispersion_z(table: &PairTable, mean: f64) -> f64 {
        // The score ∂ℓ/∂τ² at τ² = 0 over its null standard deviation: each
        // (y − μ)²/s² is chi-square(1) with variance 2, so a term's variance
        // is 1/(2s⁴) (common practice; the mean's estimation is ignored, as
        // in Dean's and Tarone's statistics).
        let (mut score, mut information) = (0.0, 0.0);
        for p in table.pairs() {
            let s4 = p.size.powi(4);
            score += p.weight * Self::boundary_score_term(mean, p);
            information += p.weight * 0.5 / s4;
        }
        if information <= 0.0 {
            return 0.0;
        }
        score / information.sqrt()
    }

    fn moment_strength(table: &PairTable, mean: f64) -> Option<f64> {
        // DerSimonian and Laird (Controlled Clinical Trials 1986):
        // τ² = (Q − (k − 1)) / (Σw − Σw²/Σw), w = 1/s², Q = Σ w (y − ȳ_w)².
        let (mut q, mut sum_w, mut sum_w2) = (0.0, 0.0, 0.0);
        for p in table.pairs() {
            let w = 1.0 / (p.size * p.size);
            q += p.weight * w * (p.count - mean).powi(2);
            sum_w += p.weight * w;
            sum_w2 += p.weight * w * w;
        }
        let tau2 = (q - (table.groups() - 1.0)) / (sum_w - sum_w2 / sum_w);
        (tau2.is_finite() && tau2 > 0.0).then(|| 1.0 / tau2)
    }

    fn strength_unit(table: &PairTable) -> f64 {
        // The precision of a typical estimate: 1 over the mean variance s².
        let (mut variance, mut groups) = (0.0, 0.0);
        for p in table.pairs() {
            variance += p.weight * p.size * p.size;
            groups += p.weight;
        }
        groups / variance
    }

    fn typical_strength(table: &PairTable) -> f64 {
        Self::strength_unit(table)
    }

    fn working(mean: f64, strength: f64) -> [f64; 2] {
        [mean, strength.ln()]
    }

    fn mean_strength(u: [f64; 2]) -> (f64, f64) {
        (u[0], u[1].exp())
    }

    fn mean_strength_of_natural([mean, variance]: [f64; 2]) -> (f64, f64) {
        (mean, 1.0 / variance)
    }

    fn natural(u: [f64; 2]) -> [f64; 2] {
        [u[0], (-u[1]).exp()]
    }

    fn natural_jacobian(u: [f64; 2]) -> [[f64; 2]; 2] {
        [[1.0, 0.0], [0.0, -(-u[1]).exp()]]
    }

    fn mean_strength_jacobian(u: [f64; 2]) -> [[f64; 2]; 2] {
        [[1.0, 0.0], [0.0, u[1].exp()]]
    }

    fn node_strengths() -> (f64, f64) {
        // Nothing here loses digits at any τ²: no node needs holding.
        (0.0, f64::INFINITY)
    }

    fn restricted_term(table: &PairTable, u: [f64; 2]) -> Option<Evaluation> {
        // R = ½ ln 2π − ½ ln S, S = Σ w/V, V = s² + τ²; in τ²:
        // R' = ½ S₂/S and R'' = ½ S₂²/S² − S₃/S with S_k = Σ w/V^k.
        let tau2 = (-u[1]).exp();
        let [s1, s2, s3] = precision_sums(table, tau2);
        let (d, dd) = (0.5 * s2 / s1, 0.5 * (s2 / s1).powi(2) - s3 / s1);
        Some(Evaluation {
            log_likelihood: 0.5 * (2.0 * PI).ln() - 0.5 * s1.ln(),
            gradient: [0.0, -tau2 * d],
            hessian: [[0.0, 0.0], [0.0, dd * tau2 * tau2 + d * tau2]],
        })
    }

    fn mean_precision(u: [f64; 2], pair: &WeightedPair) -> Option<[f64; 3]> {
        // W = 1/V, V = s² + τ², τ² = e^(−u₂): W′ = τ²/V², W″ = 2τ⁴/V³ − τ²/V².
        let tau2 = (-u[1]).exp();
        let v = pair.size * pair.size + tau2;
        let w = 1.0 / v;
        Some([w, tau2 * w * w, 2.0 * tau2 * tau2 * w * w * w - tau2 * w * w])
    }

    fn restricted_boundary(table: &PairTable) -> Option<(f64, f64)> {
        let [s1, s2, _] = precision_sums(table, 0.0);
        Some((0.5 * (2.0 * PI).ln() - 0.5 * s1.ln(), 0.5 * s2 / s1))
    }

    fn posterior_mean_sd(prior: &Prior, se: f64, y: f64) -> (f64, f64) {
        match *prior {
            Prior::CompletePooling { mean } => (mean, 0.0),
            Prior::Conjugate { natural: [mu, tau2] } => {
                let s2 = se * se;
                let v = s2 + tau2;
                // B μ + (1 − B) y, with B = s²/V, and variance s²τ²/V.
                ((s2 * mu + tau2 * y) / v, se * (tau2 / v).sqrt())
            }
        }
    }

    fn pool_weight(prior: &Prior, se: f64) -> f64 {
        match *prior {
            Prior::CompletePooling { .. } => 1.0,
            Prior::Conjugate { natural: [_, tau2] } => {
                let s2 = se * se;
                s2 / (s2 + tau2)
            }
        }
    }

    fn posterior_natural(prior: &Prior, se: f64, y: f64) -> Option<[f64; 2]> {
        match *prior {
            Prior::CompletePooling { .. } => None,
            Prior::Conjugate { .. } => {
                let (mean, sd) = Self::posterior_mean_sd(prior, se, y);
                Some([mean, sd * sd])
            }
        }
    }

    fn posterior(prior: &Prior, se: f64, y: f64, tail: f64) -> Posterior {
        let ends = match *prior {
            Prior::CompletePooling { mean } => [mean; 2],
            Prior::Conjugate { .. } => {
                let (mean, sd) = Self::posterior_mean_sd(prior, se, y);
                let (lower, upper) = normal_interval(mean, sd, tail);
                [lower, upper]
            }
        };
        Self::posterior_with_ends(prior, se, y, ends)
    }

    fn rate_tails(prior: &Prior, se: f64, y: f64, threshold: f64) -> (f64, f64) {
        match *prior {
            Prior::CompletePooling { mean } => super::point_mass_tails(mean, threshold),
            Prior::Conjugate { .. } => {
                let (mean, sd) = Self::posterior_mean_sd(prior, se, y);
                normal_tails(mean, sd, threshold)
            }
        }
    }

    fn posterior_mean_gradient([mu, tau2]: [f64; 2], se: f64, y: f64) -> [f64; 2] {
        let s2 = se * se;
        let v = s2 + tau2;
        [s2 / v, s2 * (y - mu) / (v * v)]
    }

    fn matched_interval(mean: f64, variance: f64, tail: f64) -> (f64, f64) {
        normal_interval(mean, variance.sqrt(), tail)
    }

    fn draw_count(theta: f64, se: f64, rng: &mut rand_chacha::ChaCha8Rng) -> f64 {
        use rand_distr::{Distribution, Normal};
        Normal::new(theta, se).map_or(theta, |d| d.sample(rng))
    }

    fn matched_tails(mean: f64, variance: f64, t: f64) -> (f64, f64) {
        normal_tails(mean, variance.sqrt(), t)
    }

    fn predictive_cdf(prior: &Prior, se: f64, y: f64) -> (f64, f64) {
        // A continuous predictive: both ends are Φ((y − μ)/√(s² + τ²)).
        let (mean, variance) = match *prior {
            Prior::CompletePooling { mean } => (mean, se * se),
            Prior::Conjugate { natural: [mu, tau2] } => (mu, se * se + tau2),
        };
        let below = normal_tails(mean, variance.sqrt(), y).0;
        (below, below)
    }

    fn raw_rate_variance(prior: &Prior, se: f64) -> f64 {
        match *prior {
            Prior::CompletePooling { .. } => se * se,
            Prior::Conjugate { natural: [_, tau2] } => se * se + tau2,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn derivatives_match_finite_differences() {
        super::super::assert_derivatives_match::<NormalNormal>(
            &[(0.5, 1.3), (2.0, -4.0), (0.01, 0.02), (10.0, 30.0)],
            &[[0.1, 0.5], [-1.0, 3.0], [0.5, -2.0]],
        );
    }

    #[test]
    fn the_restricted_term_matches_finite_differences() {
        let table = PairTable::from_weighted([
            WeightedPair { size: 0.5, count: 1.0, weight: 2.0 },
            WeightedPair { size: 1.5, count: -0.3, weight: 1.0 },
            WeightedPair { size: 0.2, count: 0.4, weight: 3.0 },
        ]);
        let h = 1e-5;
        for u1 in [-2.0, 0.0, 1.5] {
            let u = [0.3, u1];
            let at = NormalNormal::restricted_term(&table, u).expect("defined");
            let term = |x: f64| NormalNormal::restricted_term(&table, [0.3, x]).expect("defined");
            let g = (term(u1 + h).log_likelihood - term(u1 - h).log_likelihood) / (2.0 * h);
            let hh = (term(u1 + h).gradient[1] - term(u1 - h).gradient[1]) / (2.0 * h);
            assert!((at.gradient[1] - g).abs() < 1e-7, "{u1}");
            assert!((at.hessian[1][1] - hh).abs() < 1e-6, "{u1}");
        }
    }

    #[test]
    fn the_normal_quantile_inverts_the_tails() {
        // Source: the standard normal 97.5% point 1.959963984540054 (common practice).
        assert!((upper_normal_quantile(0.025) - 1.959963984540054).abs() < 1e-14);
        for p in [1e-300, 1e-12, 0.01, 0.3, 0.5] {
            let z = upper_normal_quantile(p);
            let back = normal_tails(0.0, 1.0, z).1;
            // A relative error ε in z moves the tail by z²ε relative.
            assert!((back - p).abs() < 1e-15 * (1.0 + z * z) * p, "{p}: {back}");
        }
    }
}
