//! The star-rating model (Dirichlet-multinomial) against references outside
//! the project: its fit against scipy.stats.dirichlet_multinomial maximised
//! by scipy.optimize, its mean-score law against mpmath's inversion integral
//! at 40 digits and against 10^7 Dirichlet draws from numpy
//! (scripts/make_level_fixtures.py); with two levels, against the
//! project's beta-binomial, whose own checks are against scipy.

use crate::util::json_fixture;
use ratepool::core::fit::fit;
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::dirichlet_multinomial::mean_score::MeanScoreLaw;
use ratepool::core::model::dirichlet_multinomial::{
    fit_levels, mean_score_tails, posterior, posterior_shares, LevelPrior, LevelTable,
};
use ratepool::core::model::{Family, Prior};
use ratepool::core::pairs::{PairTable, WeightedPair};
use ratepool::core::quantile::Tail;
use serde_json::Value;

fn floats(value: &Value) -> Vec<f64> {
    value.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect()
}

fn table_of(case: &Value) -> LevelTable {
    let levels = case["levels"].as_u64().unwrap() as usize;
    LevelTable::new(
        levels,
        case["vectors"].as_array().unwrap().iter().map(|row| {
            let row = floats(row);
            (row[..levels].to_vec(), row[levels])
        }),
    )
}

#[test]
fn the_fit_matches_scipys_maximum() {
    // Source: scipy.stats.dirichlet_multinomial.logpmf summed over the groups and
    // maximised by scipy.optimize (BFGS, then Newton-polished).
    for case in json_fixture("levels/fits.json").as_array().unwrap() {
        let name = case["name"].as_str().unwrap();
        let fitted = fit_levels(&table_of(case)).unwrap();
        let LevelPrior::Dirichlet { shapes } = &fitted.prior else { panic!("{name}: an interior fit") };
        for (got, want) in shapes.iter().zip(floats(&case["shapes"])) {
            assert!(((got - want) / want).abs() < 1e-6, "{name}: shape {got} vs {want}");
        }
        let want = case["log_likelihood"].as_f64().unwrap();
        let got = fitted.log_marginal_likelihood;
        assert!(((got - want) / want).abs() < 1e-9, "{name}: log likelihood {got} vs {want}");
        assert!(fitted.pooling.statistic > 0.0 && fitted.overdispersion.statistic > 0.0, "{name}");
        assert!(fitted.shapes_se.unwrap().iter().all(|se| se.is_finite() && *se > 0.0), "{name}");
    }
}

#[test]
fn the_mean_score_law_matches_mpmaths_inversion_integral() {
    // Source: mpmath.quad of the Gil-Pelaez integral at 40 digits (a different
    // path and rule from ratepool's), and mpmath.findroot on it for quantiles.
    let reference = json_fixture("levels/mean_score.json");
    for case in reference["cdf"].as_array().unwrap() {
        let (shapes, scores) = (floats(&case["shapes"]), floats(&case["scores"]));
        let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
        let t = case["t"].as_f64().unwrap();
        let want = case["lower"].as_f64().unwrap();
        let got = law.at(t);
        assert!((got.lower - want).abs() < 1e-12 + 1e-10 * want, "{case}: {} vs {want}", got.lower);
        assert!((got.upper - (1.0 - want)).abs() < 1e-12 + 1e-10 * (1.0 - want), "{case}");
    }
    for case in reference["quantiles"].as_array().unwrap() {
        let (shapes, scores) = (floats(&case["shapes"]), floats(&case["scores"]));
        let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
        let p = case["p"].as_f64().unwrap();
        let want = case["t"].as_f64().unwrap();
        let lower = law.quantile(Tail::Lower, p);
        let upper = law.quantile(Tail::Upper, 1.0 - p);
        // The bar is 1e-6 on the score scale; the quantiles hold 1e-10.
        assert!((lower - want).abs() < 1e-10, "{case}: {lower} vs {want}");
        assert!((upper - want).abs() < 1e-10, "{case}: {upper} vs {want}");
    }
}

#[test]
fn the_mean_score_law_matches_ten_million_dirichlet_draws() {
    // Source: numpy's Dirichlet sampler, 10^7 draws; within 4 binomial standard errors.
    let reference = json_fixture("levels/mean_score.json");
    for case in reference["draws"].as_array().unwrap() {
        let (shapes, scores) = (floats(&case["shapes"]), floats(&case["scores"]));
        let law = MeanScoreLaw { shapes: &shapes, scores: &scores };
        let (estimate, se) = (case["estimate"].as_f64().unwrap(), case["se"].as_f64().unwrap());
        let got = law.at(case["t"].as_f64().unwrap()).lower;
        assert!((got - estimate).abs() < 4.0 * se, "{case}: {got} vs {estimate} ± {se}");
    }
}

#[test]
fn two_levels_are_the_beta_binomial() {
    // The Dirichlet-multinomial with K = 2 is the beta-binomial (common practice):
    // the project's beta-binomial fit (checked against scipy in fits.rs) and
    // its posteriors agree with this model's to 1e-12.
    let cases = json_fixture("levels/fits.json");
    let case = &cases.as_array().unwrap()[2];
    assert_eq!(case["name"], "two-levels");
    let table = table_of(case);
    let pairs = (0..table.len()).map(|i| {
        let v = table.vector(i);
        WeightedPair { size: v[0] + v[1], count: v[1], weight: table.weight(i) }
    });
    let beta_binomial = fit::<BetaBinomial>(&PairTable::from_weighted(pairs)).unwrap();
    let Prior::Conjugate { natural: [alpha, beta] } = beta_binomial.prior else { panic!("an interior fit") };
    let levels = fit_levels(&table).unwrap();
    let LevelPrior::Dirichlet { shapes } = &levels.prior else { panic!("an interior fit") };
    assert!(((shapes[1] - alpha) / alpha).abs() < 1e-12, "{} vs {alpha}", shapes[1]);
    assert!(((shapes[0] - beta) / beta).abs() < 1e-12, "{} vs {beta}", shapes[0]);
    let relative = (levels.log_marginal_likelihood - beta_binomial.log_marginal_likelihood).abs()
        / beta_binomial.log_marginal_likelihood.abs();
    assert!(relative < 1e-12, "{relative}");
    let scores = [0.0, 1.0];
    for (size, count) in [(0.0, 0.0), (3.0, 3.0), (40.0, 7.0), (1000.0, 970.0)] {
        let counts = [size - count, count];
        let ours = posterior(&levels.prior, &scores, &counts, 0.025);
        let theirs = BetaBinomial::posterior(&beta_binomial.prior, size, count, 0.025);
        for (x, y) in [
            (ours.mean, theirs.mean),
            (ours.sd, theirs.sd),
            (ours.lower, theirs.lower),
            (ours.upper, theirs.upper),
        ] {
            assert!((x - y).abs() < 1e-12, "({size}, {count}): {x} vs {y}");
        }
        assert!((ours.pool_weight - theirs.pool_weight).abs() < 1e-12);
        let (below, above) = mean_score_tails(&levels.prior, &scores, &counts, 0.3);
        let (their_below, their_above) = BetaBinomial::rate_tails(&beta_binomial.prior, size, count, 0.3);
        assert!((below - their_below).abs() < 1e-12 && (above - their_above).abs() < 1e-12);
    }
}

#[test]
fn a_group_without_ratings_gets_the_prior_and_many_ratings_tend_to_their_mean() {
    // Facts of the trade (common practice): no data, the prior's mean; much data, its own.
    let prior = LevelPrior::Dirichlet { shapes: vec![0.6, 0.4, 0.9, 2.5, 6.0] };
    let scores = [1.0, 2.0, 3.0, 4.0, 5.0];
    let none = posterior(&prior, &scores, &[0.0; 5], 0.025);
    assert!((none.mean - prior.mean_score(&scores)).abs() < 1e-15);
    assert_eq!(none.pool_weight, 1.0);
    let counts = [50_000.0, 0.0, 0.0, 100_000.0, 850_000.0];
    let many = posterior(&prior, &scores, &counts, 0.025);
    let raw = (50_000.0 + 400_000.0 + 4_250_000.0) / 1e6;
    assert!((many.mean - raw).abs() < 1e-5, "{} vs {raw}", many.mean);
    // Near-normal at a million ratings: the 95% interval is 2 × 1.96 sd wide, within 1%.
    let width = many.upper - many.lower;
    assert!(many.lower < raw && raw < many.upper, "{many:?}");
    assert!((width / (2.0 * 1.959964 * many.sd) - 1.0).abs() < 0.01, "{many:?}");
    let shares = posterior_shares(&prior, &counts);
    assert!((shares.iter().sum::<f64>() - 1.0).abs() < 1e-15);
}

#[test]
fn identical_shares_everywhere_are_the_boundary() {
    // Every group 1, 2, 3 of three levels: no variation beyond the multinomial.
    let table = LevelTable::new(3, [(vec![1.0, 2.0, 3.0], 500.0)]);
    let fitted = fit_levels(&table).unwrap();
    assert_eq!(fitted.prior, LevelPrior::Pooled { shares: vec![1.0 / 6.0, 2.0 / 6.0, 3.0 / 6.0] });
    assert!(fitted.overdispersion.statistic <= 0.0);
    assert_eq!(fitted.pooling.p_value, 1.0);
}
