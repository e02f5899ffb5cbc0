//! Facts of the trade about conjugate shrinkage (common practice, no single
//! source), checked on the library's posterior function.

use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::gamma_poisson::GammaPoisson;
use ratepool::core::model::{Family, Prior};

const TAIL: f64 = 0.025;

#[test]
fn with_no_data_the_posterior_is_the_prior() {
    let prior = Prior::Conjugate { natural: [3.0, 7.0] };
    let p = BetaBinomial::posterior(&prior, 0.0, 0.0, TAIL);
    assert_eq!((p.natural, p.pool_weight), (Some([3.0, 7.0]), 1.0));
    assert!((p.mean - 0.3).abs() < 1e-15);
    let g = GammaPoisson::posterior(&prior, 0.0, 0.0, TAIL);
    assert_eq!((g.natural, g.pool_weight), (Some([3.0, 7.0]), 1.0));
}

#[test]
fn with_more_data_at_a_fixed_rate_the_posterior_mean_tends_to_the_raw_rate() {
    let prior = Prior::Conjugate { natural: [2.0, 8.0] };
    let mut last_gap = f64::INFINITY;
    for n in [10.0, 1e3, 1e5, 1e7, 1e9] {
        let p = BetaBinomial::posterior(&prior, n, 0.7 * n, TAIL);
        let gap = (p.mean - 0.7).abs();
        assert!(gap < last_gap);
        if n >= 1e3 {
            // Once the data dominate, the interval covers the raw rate.
            assert!(p.lower < 0.7 && 0.7 < p.upper, "n = {n}");
        }
        last_gap = gap;
    }
    // At n = 1e9 the pool weight is 1e-8, so the gap is 1e-8 × |0.2 − 0.7|.
    assert!(last_gap < 1e-8);
}

#[test]
fn weak_priors_move_quickly_with_data_and_strong_ones_slowly() {
    let weak = BetaBinomial::posterior(&Prior::Conjugate { natural: [0.5, 0.5] }, 10.0, 9.0, TAIL);
    let strong = BetaBinomial::posterior(&Prior::Conjugate { natural: [500.0, 500.0] }, 10.0, 9.0, TAIL);
    assert!((weak.mean - 0.5).abs() > 0.3);
    assert!((strong.mean - 0.5).abs() < 0.01);
}

#[test]
fn the_posterior_mean_lies_between_the_raw_rate_and_the_prior_mean() {
    let prior = Prior::Conjugate { natural: [4.0, 16.0] };
    for (n, k) in [(1.0, 1.0), (30.0, 2.0), (300.0, 250.0), (5.0, 0.0)] {
        let p = BetaBinomial::posterior(&prior, n, k, TAIL);
        let (lo, hi) = if k / n < 0.2 { (k / n, 0.2) } else { (0.2, k / n) };
        assert!(lo <= p.mean && p.mean <= hi);
        // And it is the pool-weighted blend: (1 − B) raw + B prior mean.
        let blend = (1.0 - p.pool_weight) * k / n + p.pool_weight * 0.2;
        assert!((p.mean - blend).abs() < 1e-14);
    }
    let g = GammaPoisson::posterior(&Prior::Conjugate { natural: [5.0, 5.0] }, 2.0, 9.0, TAIL);
    assert!(1.0 < g.mean && g.mean < 4.5);
}
