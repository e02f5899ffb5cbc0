//! Property tests of the posteriors and the fit over random priors and data
//! (proptest).

use proptest::prelude::*;
use ratepool::core::fit::fit;
use ratepool::core::incomplete::{beta_tails, gamma_tails};
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::gamma_poisson::GammaPoisson;
use ratepool::core::model::{Family, Prior};
use ratepool::core::pairs::PairTable;
use ratepool::core::quantile::{beta_quantile, gamma_quantile, Tail};

proptest! {
    #[test]
    fn beta_binomial_posteriors_are_blends_inside_their_bounds(
        alpha in 0.05f64..200.0, beta in 0.05f64..200.0, n in 1u32..5000, frac in 0.0f64..=1.0,
    ) {
        let k = (f64::from(n) * frac).floor();
        let n = f64::from(n);
        let prior = Prior::Conjugate { natural: [alpha, beta] };
        let p = BetaBinomial::posterior(&prior, n, k, 0.025);
        prop_assert!((0.0..=1.0).contains(&p.pool_weight));
        let (raw, pool) = (k / n, alpha / (alpha + beta));
        prop_assert!(p.mean >= raw.min(pool) - 1e-12 && p.mean <= raw.max(pool) + 1e-12);
        prop_assert!(p.lower <= p.upper && p.lower >= 0.0 && p.upper <= 1.0);
        prop_assert!(p.sd.is_finite() && p.sd > 0.0);
        // A wider level gives a wider interval.
        let wide = BetaBinomial::posterior(&prior, n, k, 0.005);
        prop_assert!(wide.lower <= p.lower && wide.upper >= p.upper);
    }

    #[test]
    fn gamma_poisson_posteriors_are_blends_inside_their_bounds(
        shape in 0.05f64..200.0, rate in 0.05f64..200.0, exposure in 1e-3f64..1e5, y in 0u32..10_000,
    ) {
        let y = f64::from(y);
        let prior = Prior::Conjugate { natural: [shape, rate] };
        let p = GammaPoisson::posterior(&prior, exposure, y, 0.025);
        prop_assert!((0.0..=1.0).contains(&p.pool_weight));
        let (raw, pool) = (y / exposure, shape / rate);
        let tolerance = 1e-12 * raw.max(pool);
        prop_assert!(p.mean >= raw.min(pool) - tolerance && p.mean <= raw.max(pool) + tolerance);
        prop_assert!(p.lower <= p.upper && p.lower >= 0.0 && p.upper.is_finite());
        let wide = GammaPoisson::posterior(&prior, exposure, y, 0.005);
        prop_assert!(wide.lower <= p.lower && wide.upper >= p.upper);
    }

    #[test]
    fn the_interval_contains_the_posterior_mean_when_both_shapes_are_at_least_one(
        alpha in 0.05f64..200.0, beta in 0.05f64..200.0, n in 0u32..5000, frac in 0.0f64..=1.0,
        tail in 0.0005f64..0.2,
    ) {
        // Below shape 1 it may fail, rightly: Beta(0.001, 1000) has more than
        // 97.5% of its mass below its mean.
        let k = (f64::from(n) * frac).floor();
        let n = f64::from(n);
        prop_assume!(alpha + k >= 1.0 && beta + n - k >= 1.0);
        let p = BetaBinomial::posterior(&Prior::Conjugate { natural: [alpha, beta] }, n, k, tail);
        prop_assert!(p.lower <= p.mean && p.mean <= p.upper, "{:?}", p);
        let g = GammaPoisson::posterior(&Prior::Conjugate { natural: [alpha, beta] }, frac * 100.0, k, tail);
        prop_assert!(g.lower <= g.mean && g.mean <= g.upper, "{:?}", g);
    }

    #[test]
    fn equal_pairs_share_one_posterior(
        sizes in proptest::collection::vec(0u32..6, 1..40), frac in 0.0f64..=1.0,
    ) {
        let sizes: Vec<f64> = sizes.into_iter().map(f64::from).collect();
        let counts: Vec<f64> = sizes.iter().map(|n| (n * frac).floor()).collect();
        let (table, pair_of_group) = PairTable::from_groups(&sizes, &counts);
        let prior = Prior::Conjugate { natural: [2.0, 3.0] };
        for i in 0..sizes.len() {
            for j in 0..sizes.len() {
                if (sizes[i], counts[i]) == (sizes[j], counts[j]) {
                    prop_assert_eq!(pair_of_group[i], pair_of_group[j]);
                }
            }
            let pair = table.pairs()[pair_of_group[i] as usize];
            prop_assert_eq!((pair.size, pair.count), (sizes[i], counts[i]));
            // The pair stands for exactly the groups that share it.
            let sharing = (0..sizes.len()).filter(|&j| (sizes[j], counts[j]) == (sizes[i], counts[i])).count();
            prop_assert_eq!(pair.weight, sharing as f64);
            // Its posterior is the conjugate Beta(2 + k, 3 + n − k) (common practice: conjugacy).
            let shared = BetaBinomial::posterior(&prior, pair.size, pair.count, 0.025);
            let (a, b) = (2.0 + counts[i], 3.0 + sizes[i] - counts[i]);
            prop_assert!((shared.mean - a / (a + b)).abs() < 1e-15, "{:?}", shared);
        }
        let total: f64 = table.pairs().iter().map(|p| p.weight).sum();
        prop_assert_eq!(total, sizes.len() as f64, "every group in one pair");
    }
}

proptest! {
    // A case whose data cannot be fitted (a defined refusal) is rejected and
    // not counted; at most 32 rejections beside the 128 cases checked, so
    // at least four cases in five are fits that were checked.
    #![proptest_config(ProptestConfig { cases: 128, max_global_rejects: 32, ..ProptestConfig::default() })]

    #[test]
    fn a_beta_binomial_fit_never_ends_below_its_method_of_moments_start(
        groups in proptest::collection::vec((0u32..60, 0.0f64..=1.0), 2..80),
    ) {
        let sizes: Vec<f64> = groups.iter().map(|&(n, _)| f64::from(n)).collect();
        let counts: Vec<f64> = groups.iter().map(|&(n, f)| (f64::from(n) * f).floor()).collect();
        let (table, _) = PairTable::from_groups(&sizes, &counts);
        // Unidentifiable data are a defined refusal, not a panic; a fit must not lose ground.
        let fitted = fit::<BetaBinomial>(&table);
        prop_assume!(fitted.is_ok(), "a defined refusal: {:?}", fitted.err());
        let fitted = fitted.expect("assumed");
        let slack = 1e-9 * fitted.start_log_likelihood.abs().max(1.0);
        prop_assert!(fitted.log_marginal_likelihood >= fitted.start_log_likelihood - slack, "{:?}", fitted);
        prop_assert!(fitted.log_marginal_likelihood.is_finite() && fitted.mean.is_finite());
    }

    #[test]
    fn a_gamma_poisson_fit_never_ends_below_its_method_of_moments_start(
        groups in proptest::collection::vec((1e-3f64..50.0, 0.0f64..4.0, 0.0f64..=1.0), 2..80),
    ) {
        let sizes: Vec<f64> = groups.iter().map(|g| g.0).collect();
        // Counts around a rate that varies from group to group.
        let counts: Vec<f64> = groups.iter().map(|g| (g.0 * g.1 * (0.5 + g.2)).floor()).collect();
        let (table, _) = PairTable::from_groups(&sizes, &counts);
        let fitted = fit::<GammaPoisson>(&table);
        prop_assume!(fitted.is_ok(), "a defined refusal: {:?}", fitted.err());
        let fitted = fitted.expect("assumed");
        let slack = 1e-9 * fitted.start_log_likelihood.abs().max(1.0);
        prop_assert!(fitted.log_marginal_likelihood >= fitted.start_log_likelihood - slack, "{:?}", fitted);
        prop_assert!(fitted.log_marginal_likelihood.is_finite() && fitted.mean.is_finite());
    }
}

/// Relative error in x implied by a tail probability `mass` where `p` was asked:
/// (mass − p) / (x f(x)) to first order, with x f(x) = e^(ln kernel) / `spread`;
/// and the part of it that the tail's own rounding (1e-13 relative) explains.
fn implied_relative_error(mass: f64, p: f64, ln_kernel: f64, spread: f64) -> (f64, f64) {
    let per_probability = spread / ln_kernel.exp();
    ((mass - p).abs() * per_probability, 1e-13 * p * per_probability)
}

proptest! {
    // Tiny shapes put many quantiles beyond double range (0 or 1), which are skipped.
    #![proptest_config(ProptestConfig { cases: 512, max_global_rejects: 512, ..ProptestConfig::default() })]

    // Self-consistency over the whole shape range: each quantile puts the asked
    // tail probability at its point, through this project's own incomplete
    // functions. (The external check is the mpmath sweep in reference.rs.)
    #[test]
    fn gamma_quantiles_invert_the_tail_they_were_asked_for(
        log_shape in -3.0f64..7.0, log_p in -8.0f64..-0.3, upper in any::<bool>(),
    ) {
        let (shape, p) = (10f64.powf(log_shape), 10f64.powf(log_p));
        let tail = if upper { Tail::Upper } else { Tail::Lower };
        let x = gamma_quantile(shape, tail, p);
        // Subnormal quantiles hold too few bits for a relative check (see the unit tests).
        prop_assume!(x >= f64::MIN_POSITIVE && x.is_finite());
        let t = gamma_tails(shape, x);
        let mass = if upper { t.upper } else { t.lower };
        let (error, rounding) = implied_relative_error(mass, p, t.ln_kernel, 1.0);
        prop_assert!(error <= 1e-9 + rounding, "Gamma({shape}) {tail:?} {p}: x = {x:e}, error {error:e}");
    }

    #[test]
    fn beta_quantiles_invert_the_tail_they_were_asked_for(
        log_a in -3.0f64..7.0, log_b in -3.0f64..7.0, log_p in -8.0f64..-0.3, upper in any::<bool>(),
    ) {
        let (a, b, p) = (10f64.powf(log_a), 10f64.powf(log_b), 10f64.powf(log_p));
        let tail = if upper { Tail::Upper } else { Tail::Lower };
        let x = beta_quantile(a, b, tail, p);
        prop_assume!((f64::MIN_POSITIVE..1.0).contains(&x));
        let t = beta_tails(a, b, x, 1.0 - x);
        let mass = if upper { t.upper } else { t.lower };
        // x f(x) = kernel / (1 − x) for the beta. The 1 − x formed here is off by
        // up to an ulp of 1 from the solver's, which is ε/x relative to x.
        let (error, rounding) = implied_relative_error(mass, p, t.ln_kernel, 1.0 - x);
        let bound = 1e-9 + rounding + f64::EPSILON / x;
        prop_assert!(error <= bound, "Beta({a}, {b}) {tail:?} {p}: x = {x:e}, error {error:e}");
    }
}
