//! The numerical core against reference libraries (values in tests/fixtures,
//! written by scripts/make_reference_fixtures.py).

use crate::util::{json_fixture, relative};
use ratepool::core::incomplete::{erfc, gamma_tails};
use ratepool::core::model::{beta_binomial, gamma_poisson};
use ratepool::core::quantile::{beta_quantile, gamma_quantile, Tail};
use ratepool::core::special::{digamma, ln_gamma, trigamma};

#[test]
fn statrs_ln_gamma_and_digamma_and_our_trigamma_match_mpmath() {
    // Source: mpmath 1.3 at 50 digits. This is the measurement behind keeping
    // statrs for lnΓ and ψ: worst relative errors here are a few 1e-15.
    let fixture = json_fixture("special.json");
    for row in fixture["values"].as_array().unwrap() {
        let x = row["x"].as_f64().unwrap();
        let lg = row["ln_gamma"].as_f64().unwrap();
        assert!((ln_gamma(x) - lg).abs() <= 1e-14 * lg.abs().max(1.0), "lnΓ({x})");
        let dg = row["digamma"].as_f64().unwrap();
        assert!((digamma(x) - dg).abs() <= 1e-13 * dg.abs().max(1.0), "ψ({x}) = {} vs {dg}", digamma(x));
        let tg = row["trigamma"].as_f64().unwrap();
        assert!(relative(trigamma(x), tg) <= 1e-13, "ψ′({x}) = {} vs {tg}", trigamma(x));
    }
}

#[test]
fn beta_binomial_log_pmf_matches_mpmath_up_to_strength_1e15() {
    // Source: mpmath loggamma sums at 50 digits (scipy's betabinom loses every
    // digit at these strengths, so it is not the reference here).
    let fixture = json_fixture("log_pmf.json");
    for row in fixture["beta_binomial"].as_array().unwrap() {
        let (k, n) = (row["k"].as_f64().unwrap(), row["n"].as_f64().unwrap());
        let (a, b) = (row["alpha"].as_f64().unwrap(), row["beta"].as_f64().unwrap());
        let expected = row["logpmf"].as_f64().unwrap();
        let got = beta_binomial::ln_pmf(k, n, a, b);
        // Absolute 1e-9 and relative 1e-13: no term of size n ln n is ever formed.
        let tolerance = 1e-9 + 1e-13 * expected.abs();
        assert!((got - expected).abs() <= tolerance, "k={k} n={n} a={a} b={b}: {got} vs {expected}");
    }
}

#[test]
fn negative_binomial_log_pmf_matches_mpmath() {
    // Source: mpmath loggamma sums at 50 digits.
    let fixture = json_fixture("log_pmf.json");
    for row in fixture["negative_binomial"].as_array().unwrap() {
        let (y, e) = (row["y"].as_f64().unwrap(), row["exposure"].as_f64().unwrap());
        let (shape, rate) = (row["shape"].as_f64().unwrap(), row["rate"].as_f64().unwrap());
        let expected = row["logpmf"].as_f64().unwrap();
        let got = gamma_poisson::ln_pmf(y, e, shape, rate);
        // Absolute 1e-9 and relative 1e-13: no term of size y ln y is ever formed.
        let tolerance = 1e-9 + 1e-13 * expected.abs();
        assert!((got - expected).abs() <= tolerance, "y={y} E={e} a={shape} b={rate}: {got} vs {expected}");
    }
}

#[test]
fn gamma_quantiles_match_scipy_within_1e9_relative() {
    // Source: scipy.stats.gamma.ppf and .isf, shapes 1e-3 to 1e7.
    let fixture = json_fixture("quantiles.json");
    let mut worst: f64 = 0.0;
    for row in fixture["gamma"].as_array().unwrap() {
        let (a, p) = (row["shape"].as_f64().unwrap(), row["p"].as_f64().unwrap());
        for (tail, key) in [(Tail::Lower, "lower"), (Tail::Upper, "upper")] {
            let expected = row[key].as_f64().unwrap();
            let got = gamma_quantile(a, tail, p);
            let err = relative(got, expected);
            worst = worst.max(err);
            assert!(err <= 1e-9, "Gamma({a}) {key} {p}: {got:e} vs {expected:e}");
        }
    }
    eprintln!("worst relative gamma quantile error {worst:e}");
    // The README's figure, 1.3e-11, with a margin of 2: a regression far inside the 1e-9 bar still fails.
    assert!(worst <= 2.0 * 1.3e-11, "the README says 1.3e-11; worst {worst:e}");
}

#[test]
fn beta_quantiles_match_scipy_within_1e9_relative() {
    // Source: scipy.stats.beta.ppf and .isf, both shapes 1e-3 to 1e7.
    let fixture = json_fixture("quantiles.json");
    let mut worst: f64 = 0.0;
    for row in fixture["beta"].as_array().unwrap() {
        let (a, b, p) = (row["a"].as_f64().unwrap(), row["b"].as_f64().unwrap(), row["p"].as_f64().unwrap());
        for (tail, key) in [(Tail::Lower, "lower"), (Tail::Upper, "upper")] {
            let expected = row[key].as_f64().unwrap();
            let got = beta_quantile(a, b, tail, p);
            // Where the exact quantile is below the smallest double, scipy
            // clamps to 2.2e-308 and we round to 0: both mean "underflows".
            let err = quantile_error(got, expected);
            worst = worst.max(err);
            assert!(err <= 1e-9, "Beta({a}, {b}) {key} {p}: {got:e} vs {expected:e}");
        }
    }
    eprintln!("worst relative beta quantile error {worst:e}");
    // The README's figure, 6.5e-11, with a margin of 2.
    assert!(worst <= 2.0 * 6.5e-11, "the README says 6.5e-11; worst {worst:e}");
}

/// The relative error of a quantile, where values below the smallest
/// normal double count as equal (both mean "underflows").
fn quantile_error(got: f64, expected: f64) -> f64 {
    if expected < 1e-300 && got < 1e-300 {
        0.0
    } else {
        relative(got, expected)
    }
}

#[test]
fn quantiles_at_extreme_shapes_match_arbitrary_precision_integration() {
    // Source: tests/fixtures/extreme_quantiles.json (scripts/make_extreme_quantile_fixtures.py):
    // mpmath quad of the densities at 60 digits, every Beta(a, b) with a and b
    // from 1e-3 to 1e15 in both orders and every Gamma(a) likewise, tails
    // 0.025 and 1e-6. The guarantee is 1e-9 relative over that whole range.
    let fixture = json_fixture("extreme_quantiles.json");
    let tails = [(Tail::Lower, "lower"), (Tail::Upper, "upper")];
    let (mut beta_worst, mut gamma_worst): (f64, f64) = (0.0, 0.0);
    for row in fixture["beta"].as_array().unwrap() {
        let (a, b, p) = (row["a"].as_f64().unwrap(), row["b"].as_f64().unwrap(), row["p"].as_f64().unwrap());
        for (tail, key) in tails {
            let (got, expected) = (beta_quantile(a, b, tail, p), row[key].as_f64().unwrap());
            let err = quantile_error(got, expected);
            beta_worst = beta_worst.max(err);
            assert!(err <= 1e-9, "Beta({a}, {b}) {key} {p}: {got:e} vs {expected:e}");
        }
    }
    for row in fixture["gamma"].as_array().unwrap() {
        let (a, p) = (row["shape"].as_f64().unwrap(), row["p"].as_f64().unwrap());
        for (tail, key) in tails {
            let (got, expected) = (gamma_quantile(a, tail, p), row[key].as_f64().unwrap());
            let err = quantile_error(got, expected);
            gamma_worst = gamma_worst.max(err);
            assert!(err <= 1e-9, "Gamma({a}) {key} {p}: {got:e} vs {expected:e}");
        }
    }
    eprintln!("worst relative quantile error at extreme shapes: beta {beta_worst:e}, gamma {gamma_worst:e}");
    // The README's figures, 1.2e-12 and 2.4e-13, with a margin of 2.
    assert!(beta_worst <= 2.0 * 1.2e-12, "the README says 1.2e-12; worst {beta_worst:e}");
    assert!(gamma_worst <= 2.0 * 2.4e-13, "the README says 2.4e-13; worst {gamma_worst:e}");
    let counted =
        (fixture["beta"].as_array().unwrap().len() * 2, fixture["gamma"].as_array().unwrap().len() * 2);
    assert_eq!(counted, (484, 44), "the README counts 484 beta and 44 gamma quantiles");
}

#[test]
fn erfc_matches_mpmath_where_statrs_does_not() {
    // Source: mpmath 1.3 erfc at 50 digits (scripts/make_temme_coefficients.py).
    // statrs 0.19's erfc was measured here first: 1.0e-10 relative off at 0.5,
    // which is why the large-shape gamma tails use the project's own.
    let fixture = json_fixture("incomplete_gamma.json");
    let mut statrs_worst: f64 = 0.0;
    for row in fixture["erfc"].as_array().unwrap() {
        let (x, expected) = (row["x"].as_f64().unwrap(), row["erfc"].as_f64().unwrap());
        let got = erfc(x);
        // x² carries one rounding, which e^(−x²) turns into x² ε relative.
        let tolerance = 4.0 * f64::EPSILON * (1.0 + x * x);
        assert!(relative(got, expected) <= tolerance, "erfc({x}) = {got:e} vs {expected:e}");
        statrs_worst = statrs_worst.max(relative(statrs::function::erf::erfc(x), expected));
    }
    eprintln!("worst relative error of statrs' erfc on the same points {statrs_worst:e}");
}

#[test]
fn gamma_tails_at_large_shapes_match_mpmath() {
    // Source: mpmath 1.3 gammainc at 50 digits, shapes 100 to 1e7 and x from
    // 6 standard deviations below the mean to 6 above: the series and the
    // continued fraction below shape 3000, Temme's expansion from there.
    let fixture = json_fixture("incomplete_gamma.json");
    let mut worst: f64 = 0.0;
    for row in fixture["gamma"].as_array().unwrap() {
        let (a, x) = (row["shape"].as_f64().unwrap(), row["x"].as_f64().unwrap());
        let t = gamma_tails(a, x);
        // Each tail in relative terms where it is the smaller one, and to 1e-15 absolute otherwise.
        for (got, key) in [(t.lower, "lower"), (t.upper, "upper")] {
            let expected = row[key].as_f64().unwrap();
            let err = if expected <= 0.5 { relative(got, expected) } else { (got - expected).abs() };
            worst = worst.max(err);
            assert!(err <= 1e-13, "Gamma({a}) at {x}: {key} {got:e} vs {expected:e}");
        }
    }
    eprintln!("worst gamma tail error at large shapes {worst:e}");
}

/// `prob_below` and `prob_above` (each model's `rate_tails`) against mpmath
/// at 50 digits (`scripts/make_exceedance_fixtures.py`): Beta shapes 1e-3 to
/// 1e5 at proportions 1e-9 to 1 − 1e-6, Gamma shapes 1e-3 to 1e7 at 1e-6 to
/// 10 times the mean. Bar: 1e-12 absolute and 1e-9 relative wherever the
/// probability exceeds 1e-300.
#[test]
fn exceedance_probabilities_match_mpmath() {
    use ratepool::core::model::{Family, Prior};
    let fixture = json_fixture("exceedance.json");
    let mut checked = 0;
    let mut worst: f64 = 0.0;
    let mut check = |got: f64, expected: f64, what: &str| {
        if expected > 1e-300 {
            let error = (got - expected).abs();
            assert!(error <= 1e-12 && error <= 1e-9 * expected, "{what}: {got:e} against {expected:e}");
            worst = worst.max(error / expected);
            checked += 1;
        }
    };
    for row in fixture["beta"].as_array().unwrap() {
        let [a, b, t, below, above] = ["a", "b", "t", "below", "above"].map(|k| row[k].as_f64().unwrap());
        let prior = Prior::Conjugate { natural: [a, b] };
        let (got_below, got_above) = beta_binomial::BetaBinomial::rate_tails(&prior, 0.0, 0.0, t);
        check(got_below, below, &format!("Beta({a}, {b}) below {t}"));
        check(got_above, above, &format!("Beta({a}, {b}) above {t}"));
    }
    for row in fixture["gamma"].as_array().unwrap() {
        let [shape, rate, t, below, above] =
            ["shape", "rate", "t", "below", "above"].map(|k| row[k].as_f64().unwrap());
        let prior = Prior::Conjugate { natural: [shape, rate] };
        let (got_below, got_above) = gamma_poisson::GammaPoisson::rate_tails(&prior, 0.0, 0.0, t);
        check(got_below, below, &format!("Gamma({shape}, {rate}) below {t}"));
        check(got_above, above, &format!("Gamma({shape}, {rate}) above {t}"));
    }
    assert!(checked > 900, "only {checked} values checked");
    println!("exceedance: {checked} values, worst relative error {worst:.2e}");
    // The README's figure, 5.6e-12 over 949 values, with a margin of 2.
    assert_eq!(checked, 949, "the README counts 949 values");
    assert!(worst <= 2.0 * 5.6e-12, "the README says 5.6e-12; worst {worst:e}");
}

#[test]
fn prior_predictive_cdfs_match_scipy() {
    // Source: scipy.stats betabinom.cdf and nbinom.cdf (scripts/make_predictive_fixtures.py).
    use ratepool::core::model::{Family, Prior};
    let fixture = json_fixture("predictive_cdf.json");
    let mut worst: f64 = 0.0;
    for row in fixture["rows"].as_array().unwrap() {
        let (size, count) = (row["size"].as_f64().unwrap(), row["count"].as_f64().unwrap());
        let prior =
            Prior::Conjugate { natural: [row["first"].as_f64().unwrap(), row["second"].as_f64().unwrap()] };
        let (below, at_most) = match row["model"].as_str().unwrap() {
            "beta-binomial" => beta_binomial::BetaBinomial::predictive_cdf(&prior, size, count),
            _ => gamma_poisson::GammaPoisson::predictive_cdf(&prior, size, count),
        };
        for (got, key) in [(below, "below"), (at_most, "at_most")] {
            let want = row[key].as_f64().unwrap();
            worst = worst.max((got - want).abs());
            assert!((got - want).abs() < 1e-10, "{row}: {key} {got} vs {want}");
        }
    }
    println!("predictive CDFs: worst absolute difference {worst:.1e}");
    // The README's figure, 3.1e-11, with a margin of 2.
    assert!(worst <= 2.0 * 3.1e-11, "the README says 3.1e-11; worst {worst:e}");
}

#[test]
fn beta_binomial_predictive_cdfs_past_the_summed_terms_match_mpmath() {
    // Source: tests/fixtures/predictive_cdf_large.json (scripts/make_large_predictive_fixtures.py):
    // every term of the pmf in mpmath at 30 digits, summed, at n = 1e5 and 1e6 and priors from
    // Beta(0.3, 0.7) to Beta(5e4, 5e4). Where the spread needs more than 20,000 terms a side,
    // ratepool sums those and takes the far tail as continuous.
    use ratepool::core::model::{Family, Prior};
    let fixture = json_fixture("predictive_cdf_large.json");
    let rows = fixture["rows"].as_array().unwrap();
    assert!(rows.len() >= 70, "{} rows", rows.len());
    let mut worst: f64 = 0.0;
    for row in rows {
        let (size, count) = (row["size"].as_f64().unwrap(), row["count"].as_f64().unwrap());
        let prior =
            Prior::Conjugate { natural: [row["first"].as_f64().unwrap(), row["second"].as_f64().unwrap()] };
        let (below, at_most) = beta_binomial::BetaBinomial::predictive_cdf(&prior, size, count);
        for (got, key) in [(below, "below"), (at_most, "at_most")] {
            let want = row[key].as_f64().unwrap();
            worst = worst.max((got - want).abs());
        }
    }
    println!("predictive CDFs at n up to 1e6: worst absolute difference {worst:.1e}");
    // The README's figure for this regime, 8.3e-6 (the continuous far tail; the calibration
    // check bins these values in tenths), with a margin of 2.
    const WORST_LARGE_N_CDF: f64 = 8.3e-6;
    assert!(worst <= 2.0 * WORST_LARGE_N_CDF, "the README says {WORST_LARGE_N_CDF:e}; worst {worst:e}");
}
