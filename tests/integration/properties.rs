//! Property tests of the posteriors over random priors and data (proptest).

use proptest::prelude::*;
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::gamma_poisson::GammaPoisson;
use ratepool::core::model::{Family, Prior};

proptest! {
    #[test]
    fn beta_binomial_posteriors_are_blends_inside_their_bounds(
        alpha in 0.05f64..200.0, beta in 0.05f64..200.0, n in 1u32..5000, frac in 0.0f64..=1.0,
    ) {
        let k = (f64::from(n) * frac).floor();
        let n = f64::from(n);
        let prior = Prior::Conjugate { first: alpha, second: beta };
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
        let prior = Prior::Conjugate { first: shape, second: rate };
        let p = GammaPoisson::posterior(&prior, exposure, y, 0.025);
        prop_assert!((0.0..=1.0).contains(&p.pool_weight));
        let (raw, pool) = (y / exposure, shape / rate);
        let tolerance = 1e-12 * raw.max(pool);
        prop_assert!(p.mean >= raw.min(pool) - tolerance && p.mean <= raw.max(pool) + tolerance);
        prop_assert!(p.lower <= p.upper && p.lower >= 0.0 && p.upper.is_finite());
        let wide = GammaPoisson::posterior(&prior, exposure, y, 0.005);
        prop_assert!(wide.lower <= p.lower && wide.upper >= p.upper);
    }
}
