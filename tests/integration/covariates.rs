//! Priors with covariates against references outside the project, on open
//! data that registry packages ship (scripts/make_covariate_fixtures.py
//! names each source): statsmodels' NB2 regression for the gamma-Poisson
//! model, scipy's beta-binomial pmf maximised by scipy for the
//! beta-binomial one, and the (restricted) profile likelihood maximised by
//! scipy for the normal one.

use crate::util::{fixture, json_fixture, relative};
use ratepool::core::fit::Likelihood;
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::gamma_poisson::GammaPoisson;
use ratepool::core::model::normal_normal::NormalNormal;
use ratepool::core::model::Family;
use ratepool::core::pairs::WeightedPair;
use ratepool::core::regression::{fit_regression, CellPairs, Design, RegressionFit};
use serde_json::Value;

/// One row per group of a fixture: (size, count, covariates), the
/// covariates as the reference's design columns after the intercept.
fn rows(
    name: &str,
    size: &str,
    count: &str,
    numeric: &[&str],
    levels: Option<(&str, &[&str])>,
) -> Vec<(f64, f64, Vec<f64>)> {
    let text = std::fs::read_to_string(fixture(&format!("covariates/{name}"))).unwrap();
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    let at = |column: &str| header.iter().position(|h| *h == column).unwrap();
    lines
        .map(|line| {
            let cells: Vec<&str> = line.split(',').collect();
            let number = |column: &str| cells[at(column)].parse::<f64>().unwrap();
            let mut x: Vec<f64> = numeric.iter().map(|c| number(c)).collect();
            if let Some((column, others)) = levels {
                x.extend(others.iter().map(|level| f64::from(u8::from(cells[at(column)] == *level))));
            }
            (number(size), number(count), x)
        })
        .collect()
}

/// The covariate fit of `F` to one cell per row.
fn fit<F: Family>(rows: &[(f64, f64, Vec<f64>)], names: &[&str], likelihood: Likelihood) -> RegressionFit {
    let pairs: Vec<WeightedPair> = rows
        .iter()
        .map(|(size, count, _)| WeightedPair { size: *size, count: *count, weight: 1.0 })
        .collect();
    let ranges: Vec<std::ops::Range<usize>> = (0..rows.len()).map(|i| i..i + 1).collect();
    let values: Vec<f64> =
        rows.iter().flat_map(|(_, _, x)| std::iter::once(1.0).chain(x.iter().copied())).collect();
    let design = Design::new(names.iter().map(|n| n.to_string()).collect(), values);
    let cells = CellPairs { pairs: &pairs, ranges: &ranges };
    design.check(&cells.groups()).expect("a full-rank design");
    // Started from a pooled rate and a middling common parameter.
    let (size, count): (f64, f64) = pairs.iter().fold((0.0, 0.0), |(s, c), p| (s + p.size, c + p.count));
    let start = F::working(
        if F::TERMS.rates == ratepool::core::model::RateRange::Real {
            count / pairs.len() as f64
        } else {
            count / size
        },
        10.0,
    );
    fit_regression::<F>(&design, cells, likelihood, (start[0], start[1]), 1.0).expect("an interior fit")
}

fn numbers(value: &Value) -> Vec<f64> {
    value.as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect()
}

/// Coefficients within `tolerance` relative (of the larger of the value
/// and its standard error), standard errors within `se_tolerance`.
fn assert_coefficients(fitted: &RegressionFit, reference: &Value, tolerance: f64, se_tolerance: f64) {
    let (want, want_se) = (numbers(&reference["coefficients"]), numbers(&reference["coefficient_se"]));
    for (k, (b, se)) in want.iter().zip(&want_se).enumerate() {
        let got = fitted.coefficients[k];
        assert!((got - b).abs() < tolerance * b.abs().max(*se), "coefficient {k}: {got} against {b}");
        let got_se = fitted.coefficient_se(k);
        assert!(relative(got_se, *se) < se_tolerance, "se {k}: {got_se} against {se}");
    }
}

#[test]
fn gamma_poisson_with_covariates_is_statsmodels_nb2_regression() {
    // Source: statsmodels NegativeBinomial(loglike_method='nb2') with exposure,
    // on libpysal's North Carolina SIDS counties (scripts/make_covariate_fixtures.py).
    let reference = &json_fixture("covariates/references.json")["gamma_poisson"];
    let data = rows(
        "sids_counties.csv",
        "births",
        "sids",
        &["nonwhite_share"],
        Some(("birth_band", &["medium", "small"])),
    );
    let names = ["intercept", "nonwhite_share", "birth_band=medium", "birth_band=small"];
    let fitted = fit::<GammaPoisson>(&data, &names, Likelihood::Marginal);
    assert_coefficients(&fitted, reference, 1e-6, 1e-4);
    let shape = fitted.common.exp();
    assert!(relative(shape, reference["shape"].as_f64().unwrap()) < 1e-6, "shape {shape}");
    let shape_se = shape * fitted.common_se();
    assert!(relative(shape_se, reference["shape_se"].as_f64().unwrap()) < 1e-4, "shape se {shape_se}");
    assert!(relative(fitted.log_likelihood, reference["log_likelihood"].as_f64().unwrap()) < 1e-10);
}

#[test]
fn beta_binomial_with_covariates_is_the_scipy_fit() {
    // Source: scipy.stats.betabinom.logpmf summed and maximised by scipy, on
    // statsmodels' star98 districts (scripts/make_covariate_fixtures.py).
    let reference = &json_fixture("covariates/references.json")["beta_binomial"];
    let data = rows("star98_districts.csv", "pupils", "above", &["lowinc", "perminte"], None);
    let fitted = fit::<BetaBinomial>(&data, &["intercept", "lowinc", "perminte"], Likelihood::Marginal);
    assert_coefficients(&fitted, reference, 1e-6, 1e-4);
    let strength = fitted.common.exp();
    assert!(relative(strength, reference["strength"].as_f64().unwrap()) < 1e-6, "strength {strength}");
    assert!(relative(strength * fitted.common_se(), reference["strength_se"].as_f64().unwrap()) < 1e-4);
    assert!(relative(fitted.log_likelihood, reference["log_likelihood"].as_f64().unwrap()) < 1e-10);
}

#[test]
fn normal_with_covariates_is_the_scipy_fit_by_ml_and_reml() {
    // Source: the (restricted) profile likelihood in numpy maximised by
    // scipy.optimize.minimize_scalar, on star98's districts as logits with
    // delta-method standard errors (scripts/make_covariate_fixtures.py).
    let data = rows("star98_logits.csv", "logit_se", "logit_above", &["lowinc", "perminte"], None);
    for (key, likelihood) in [("normal_ml", Likelihood::Marginal), ("normal_reml", Likelihood::Restricted)] {
        let reference = &json_fixture("covariates/references.json")[key];
        let fitted = fit::<NormalNormal>(&data, &["intercept", "lowinc", "perminte"], likelihood);
        assert_coefficients(&fitted, reference, 1e-6, 1e-4);
        let tau2 = (-fitted.common).exp();
        assert!(relative(tau2, reference["tau2"].as_f64().unwrap()) < 1e-6, "{key}: tau2 {tau2}");
        assert!(relative(tau2 * fitted.common_se(), reference["tau2_se"].as_f64().unwrap()) < 1e-4, "{key}");
        assert!(
            relative(fitted.log_likelihood, reference["log_likelihood"].as_f64().unwrap()) < 1e-10,
            "{key}: {}",
            fitted.log_likelihood
        );
    }
}
