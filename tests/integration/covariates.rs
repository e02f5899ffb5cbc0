//! Priors with covariates against references outside the project, on open
//! data that registry packages ship (scripts/make_covariate_fixtures.py
//! names each source): statsmodels' NB2 regression for the gamma-Poisson
//! model, scipy's beta-binomial pmf maximised by scipy for the
//! beta-binomial one, and the (restricted) profile likelihood maximised by
//! scipy for the normal one.

use crate::util::{
    assert_refused, fixture, json_fixture, paired, ratepool, relative, stderr, summary, write, Csv,
};
use ratepool::core::fit::Likelihood;
use ratepool::core::model::beta_binomial::BetaBinomial;
use ratepool::core::model::gamma_poisson::GammaPoisson;
use ratepool::core::model::normal_normal::NormalNormal;
use ratepool::core::model::Family;
use ratepool::core::pairs::WeightedPair;
use ratepool::core::regression::{fit_regression, Design, RegressionFit};
use serde_json::Value;
use std::path::Path;

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
    let values: Vec<f64> =
        rows.iter().flat_map(|(_, _, x)| std::iter::once(1.0).chain(x.iter().copied())).collect();
    let design = Design::dense(names.iter().map(|n| n.to_string()).collect(), values);
    design.check(&vec![1.0; pairs.len()]).expect("a full-rank design");
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
    fit_regression::<F>(&design, &pairs, likelihood, (start[0], start[1]), 1.0).expect("an interior fit")
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

/// Runs `ratepool fit` in `dir` on a covariate fixture with `args` and
/// returns the summary and the table.
fn fit_on_command_line(dir: &Path, args: &[&str]) -> (Value, Csv) {
    let mut all = vec!["fit", "--output", "out.csv", "--summary", "s.json"];
    all.extend(args);
    let out = ratepool(dir, &all);
    assert!(out.status.success(), "{}", stderr(&out));
    (summary(&dir.join("s.json")), Csv::read(&dir.join("out.csv")))
}

/// The summary's coefficients against the reference's, by name.
fn assert_summary_coefficients(prior: &Value, reference: &Value) {
    let coefficients = prior["coefficients"].as_array().expect("coefficients");
    let names: Vec<&str> =
        reference["names"].as_array().unwrap().iter().map(|n| n.as_str().unwrap()).collect();
    let (want, want_se) = (numbers(&reference["coefficients"]), numbers(&reference["coefficient_se"]));
    for (entry, name) in paired(coefficients, &names, "coefficients") {
        assert_eq!(entry["name"], *name);
    }
    for (k, c) in coefficients.iter().enumerate() {
        let (estimate, se) = (c["estimate"].as_f64().unwrap(), c["se"].as_f64().unwrap());
        assert!((estimate - want[k]).abs() < 1e-6 * want[k].abs().max(want_se[k]), "{c}");
        assert!(relative(se, want_se[k]) < 1e-4, "{c}");
        assert!(relative(c["z"].as_f64().unwrap(), estimate / se) < 1e-12, "{c}");
    }
}

#[test]
fn the_command_line_fits_match_the_references() {
    let references = json_fixture("covariates/references.json");
    let dir = tempfile::tempdir().unwrap();
    let sids = fixture("covariates/sids_counties.csv");
    let (s, _) = fit_on_command_line(
        dir.path(),
        &["--model", "gamma-poisson", "--input", sids.to_str().unwrap(), "--group", "county"]
            .into_iter()
            .chain(["--events", "sids", "--exposure", "births", "--covariates", "nonwhite_share,birth_band"])
            .collect::<Vec<_>>(),
    );
    // Source: statsmodels NB2 (scripts/make_covariate_fixtures.py).
    let reference = &references["gamma_poisson"];
    assert_summary_coefficients(&s["prior"], reference);
    assert!(relative(s["prior"]["shape"].as_f64().unwrap(), reference["shape"].as_f64().unwrap()) < 1e-6);
    let ll = s["fit"]["log_marginal_likelihood"].as_f64().unwrap();
    assert!(relative(ll, reference["log_likelihood"].as_f64().unwrap()) < 1e-10, "{ll}");
    assert_eq!(s["prior"]["link"], "log");
    assert_eq!(s["prior"]["covariates"][1]["levels"], serde_json::json!(["large", "medium", "small"]));
    let test = &s["prior"]["likelihood_ratio_test"];
    assert_eq!(test["degrees_of_freedom"], 3);

    let star = fixture("covariates/star98_districts.csv");
    let (s, _) = fit_on_command_line(
        dir.path(),
        &["--model", "beta-binomial", "--input", star.to_str().unwrap(), "--group", "district"]
            .into_iter()
            .chain(["--successes", "above", "--trials", "pupils", "--covariates", "lowinc,perminte"])
            .collect::<Vec<_>>(),
    );
    // Source: scipy betabinom fit (scripts/make_covariate_fixtures.py).
    let reference = &references["beta_binomial"];
    assert_summary_coefficients(&s["prior"], reference);
    assert!(
        relative(s["prior"]["strength"].as_f64().unwrap(), reference["strength"].as_f64().unwrap()) < 1e-6
    );

    let logits = fixture("covariates/star98_logits.csv");
    for (key, method) in [("normal_ml", "ml"), ("normal_reml", "reml")] {
        let (s, _) = fit_on_command_line(
            dir.path(),
            &["--model", "normal-normal", "--input", logits.to_str().unwrap(), "--group", "district"]
                .into_iter()
                .chain([
                    "--estimate",
                    "logit_above",
                    "--std-error",
                    "logit_se",
                    "--covariates",
                    "lowinc,perminte",
                ])
                .chain(["--variance-method", method])
                .collect::<Vec<_>>(),
        );
        // Source: the scipy (restricted) profile likelihood (scripts/make_covariate_fixtures.py).
        let reference = &references[key];
        assert_summary_coefficients(&s["prior"], reference);
        assert!(
            relative(s["prior"]["variance"].as_f64().unwrap(), reference["tau2"].as_f64().unwrap()) < 1e-6
        );
        let objective = match method {
            "reml" => s["fit"]["restricted_log_likelihood"].as_f64().unwrap(),
            _ => s["fit"]["log_marginal_likelihood"].as_f64().unwrap(),
        };
        assert!(
            relative(objective, reference["log_likelihood"].as_f64().unwrap()) < 1e-10,
            "{key}: {objective}"
        );
        assert_eq!(s["prior"]["likelihood_ratio_test"].is_null(), method == "reml");
    }
}

#[test]
fn each_group_is_pulled_toward_its_own_centre() {
    // The centre exp(x'b) from the summary's own coefficients, and the
    // conjugate posterior mean (r + y)/(r/mu + E) of a Gamma(r, r/mu) prior
    // (textbook conjugacy, common practice), recomputed here from the table.
    let dir = tempfile::tempdir().unwrap();
    let sids = fixture("covariates/sids_counties.csv");
    let (s, table) = fit_on_command_line(
        dir.path(),
        &["--model", "gamma-poisson", "--input", sids.to_str().unwrap(), "--group", "county"]
            .into_iter()
            .chain(["--events", "sids", "--exposure", "births", "--covariates", "nonwhite_share,birth_band"])
            .collect::<Vec<_>>(),
    );
    let b = numbers(&Value::Array(
        s["prior"]["coefficients"].as_array().unwrap().iter().map(|c| c["estimate"].clone()).collect(),
    ));
    let r = s["prior"]["shape"].as_f64().unwrap();
    let (share, band) = (table.floats("nonwhite_share"), table.column("birth_band"));
    let (events, births) = (table.floats("sids"), table.floats("births"));
    let (centre, posterior) = (table.floats("prior_mean"), table.floats("posterior_mean"));
    assert_eq!(centre.len(), 100);
    for i in 0..centre.len() {
        let eta = b[0]
            + b[1] * share[i]
            + b[2] * f64::from(u8::from(band[i] == "medium"))
            + b[3] * f64::from(u8::from(band[i] == "small"));
        let mu = eta.exp();
        assert!(relative(centre[i], mu) < 1e-12, "row {i}: {} against {mu}", centre[i]);
        let want = (r + events[i]) / (r / mu + births[i]);
        assert!(relative(posterior[i], want) < 1e-12, "row {i}: {} against {want}", posterior[i]);
    }
}

/// A small table of sellers with a numeric and a text covariate, for the refusals.
const SELLERS: &str = "seller,good,rated,tenure,kind\n\
a,8,10,1.5,x\nb,3,9,0.5,y\nc,12,20,3.0,x\nd,1,6,0.2,y\ne,30,40,4.5,z\nf,7,12,2.0,z\ng,5,5,2.5,x\nh,2,8,0.7,y\n";

fn seller_args<'a>(extra: &[&'a str]) -> Vec<&'a str> {
    let mut args = vec!["fit", "--model", "beta-binomial", "--input", "in.csv", "--group", "seller"];
    args.extend(["--successes", "good", "--trials", "rated", "--output", "out.csv", "--summary", "s.json"]);
    args.extend(extra);
    args
}

#[test]
fn bad_covariate_values_are_rows_named_with_their_column() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        (SELLERS.replace("d,1,6,0.2,y", "d,1,6,,y"), "row 4, column 'tenure': missing covariate value"),
        (SELLERS.replace("d,1,6,0.2,y", "d,1,6,inf,y"), "row 4, column 'tenure': inf is not a finite number"),
        (SELLERS.replace("f,7,12,2.0,z", "f,7,12,2.0,"), "row 6, column 'kind': missing covariate value"),
    ];
    for (text, message) in &cases {
        write(dir.path(), "in.csv", text);
        assert_refused(dir.path(), &seller_args(&["--covariates", "tenure,kind"]), message, "out.csv");
        assert!(!dir.path().join("s.json").exists());
    }
    write(dir.path(), "in.csv", &SELLERS.replace("b,3,9,0.5,y", "b,3,9,0,y"));
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates-log", "tenure"]),
        "row 2, column 'tenure': 0 is not above zero",
        "out.csv",
    );
    // Skipped rows go to the rejects with their reason; the rest are fitted.
    write(dir.path(), "in.csv", &cases[0].0);
    let out = ratepool(
        dir.path(),
        &seller_args(&["--covariates", "tenure,kind", "--on-invalid", "skip", "--rejects", "rejects.csv"]),
    );
    assert!(out.status.success(), "{}", stderr(&out));
    let rejects = std::fs::read_to_string(dir.path().join("rejects.csv")).unwrap();
    assert!(rejects.contains("tenure") && rejects.contains("missing covariate value"), "{rejects}");
    assert_eq!(Csv::read(&dir.path().join("out.csv")).rows.len(), 7);
}

#[test]
fn a_constant_a_collinear_or_a_separating_covariate_is_refused_by_name() {
    let dir = tempfile::tempdir().unwrap();
    let constant = SELLERS
        .lines()
        .map(|l| if l.starts_with("seller") { format!("{l},site") } else { format!("{l},north") })
        .collect::<Vec<_>>()
        .join("\n");
    write(dir.path(), "in.csv", &constant);
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates", "tenure,site"]),
        "the covariate 'site' takes one value ('north')",
        "out.csv",
    );
    let doubled = SELLERS
        .lines()
        .map(|l| match l.split(',').nth(3) {
            Some("tenure") => format!("{l},months"),
            Some(t) => format!("{l},{}", t.parse::<f64>().unwrap() * 12.0),
            None => l.to_string(),
        })
        .collect::<Vec<_>>()
        .join("\n");
    write(dir.path(), "in.csv", &doubled);
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates", "tenure,months"]),
        "'months' is a linear function of 'tenure'",
        "out.csv",
    );
    // Every seller of kind y has no good ratings: its coefficient runs to minus infinity (exit 3).
    let separated = SELLERS.replace("b,3,9", "b,0,9").replace("d,1,6", "d,0,6").replace("h,2,8", "h,0,8");
    write(dir.path(), "in.csv", &separated);
    let out = ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind"]));
    assert_eq!(out.status.code(), Some(3), "{}", stderr(&out));
    assert!(stderr(&out).contains("the coefficient of 'kind=y' runs to minus infinity"), "{}", stderr(&out));
    assert!(!dir.path().join("out.csv").exists() && !dir.path().join("s.json").exists());
}

#[test]
fn covariates_refuse_what_they_do_not_combine_with() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", SELLERS);
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates", "tenure", "--by", "kind"]),
        "covariates do not combine with --by",
        "out.csv",
    );
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates", "tenure", "--covariates-levels", "tenure"]),
        "'tenure' is named twice",
        "out.csv",
    );
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates", "good"]),
        "it is already the group or a count column",
        "out.csv",
    );
    // Too many levels: a text column of one value per seller beyond the limit.
    let many: String = std::iter::once("seller,good,rated,code".to_string())
        .chain((0..260).map(|i| format!("s{i},{},{},c{i}", i % 7, 10 + i % 5)))
        .collect::<Vec<_>>()
        .join("\n");
    write(dir.path(), "in.csv", &many);
    assert_refused(
        dir.path(),
        &seller_args(&["--covariates", "code"]),
        "more than 200 indicators; fit a prior per level with --by code",
        "out.csv",
    );
}

#[test]
fn a_saved_covariate_prior_scores_new_groups_as_it_fitted_them() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", SELLERS);
    let out = ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind"]));
    assert!(out.status.success(), "{}", stderr(&out));
    let score = |input: &str, extra: &[&str]| {
        let mut args = vec!["score", "--prior", "s.json", "--input", input, "--group", "seller"];
        args.extend(["--successes", "good", "--trials", "rated", "--output", "scored.csv"]);
        args.extend(extra);
        ratepool(dir.path(), &args)
    };
    // The same groups scored with the saved prior: the same posteriors, bit for bit.
    let out = score("in.csv", &[]);
    assert!(out.status.success(), "{}", stderr(&out));
    let (fitted, scored) =
        (Csv::read(&dir.path().join("out.csv")), Csv::read(&dir.path().join("scored.csv")));
    for column in ["prior_mean", "posterior_mean", "interval_lo", "interval_hi"] {
        assert_eq!(fitted.column(column), scored.column(column), "{column}");
    }
    std::fs::remove_file(dir.path().join("scored.csv")).unwrap();
    // A level the prior never saw is a row fault naming its row and column, not a silent reference level.
    write(dir.path(), "new.csv", "seller,good,rated,tenure,kind\nq,3,4,1.0,x\nr,2,9,2.0,w\n");
    let out = score("new.csv", &[]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(
        stderr(&out).contains(
            "row 2, column 'kind': level 'w' is not among those the prior was fitted with (x, y, z)"
        ),
        "{}",
        stderr(&out)
    );
    assert!(!dir.path().join("scored.csv").exists());
    // Other covariates than the prior's, or corrected intervals (no covariance saved): refused.
    let out = score("in.csv", &["--covariates", "tenure"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("the prior was fitted with the covariates tenure, kind"),
        "{}",
        stderr(&out)
    );
    let out = score("in.csv", &["--intervals", "corrected"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("holds no covariance of its coefficients"), "{}", stderr(&out));
    assert!(!dir.path().join("scored.csv").exists());
}

#[test]
fn the_report_of_a_covariate_prior_plots_raw_values_against_their_centres() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", SELLERS);
    let out = ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind", "--report", "report.html"]));
    assert!(out.status.success(), "{}", stderr(&out));
    let page = std::fs::read_to_string(dir.path().join("report.html")).unwrap();
    assert!(page.contains("Raw values against their prior centres"), "the centres figure");
    assert!(
        page.contains("Beta centred on a regression on the logit scale: intercept"),
        "the prior in words"
    );
    assert!(!page.contains("The prior over the raw values"), "one prior's density has no place here");
    assert!(
        page.contains("Each group is pulled toward what its covariates (tenure, kind) predict"),
        "the caution"
    );
}

#[test]
fn rows_that_are_parts_or_trials_of_a_group_carry_its_covariates() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", SELLERS);
    let out = ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind"]));
    assert!(out.status.success(), "{}", stderr(&out));
    // The same sellers as parts (two rows each, the covariates repeated) and as trials (one row per rating).
    let (mut parts, mut trials) =
        (vec!["seller,good,rated,tenure,kind".to_string()], vec!["seller,positive,tenure,kind".to_string()]);
    for line in SELLERS.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        let (good, rated): (u32, u32) = (f[1].parse().unwrap(), f[2].parse().unwrap());
        parts.push(format!("{},{},{},{},{}", f[0], good / 2, rated / 2, f[3], f[4]));
        parts.push(format!("{},{},{},{},{}", f[0], good - good / 2, rated - rated / 2, f[3], f[4]));
        for k in 0..rated {
            trials.push(format!("{},{},{},{}", f[0], u32::from(k < good), f[3], f[4]));
        }
    }
    write(dir.path(), "parts.csv", &parts.join("\n"));
    write(dir.path(), "trials.csv", &trials.join("\n"));
    let args_for = |input: &'static str, rows: &[&'static str], output: &'static str| {
        let mut args =
            vec!["fit", "--model", "beta-binomial", "--group", "seller", "--covariates", "tenure,kind"];
        args.extend(["--input", input, "--successes", "good", "--trials", "rated", "--output", output]);
        args.extend(rows);
        args
    };
    for (input, rows, output) in [
        ("parts.csv", &["--aggregate"][..], "parts-out.csv"),
        ("trials.csv", &["--outcome", "positive"][..], "trials-out.csv"),
    ] {
        let out = ratepool(dir.path(), &args_for(input, rows, output));
        assert!(out.status.success(), "{}", stderr(&out));
    }
    let whole = Csv::read(&dir.path().join("out.csv"));
    for name in ["parts-out.csv", "trials-out.csv"] {
        let summed = Csv::read(&dir.path().join(name));
        for column in
            ["seller", "good", "rated", "prior_mean", "posterior_mean", "interval_lo", "interval_hi"]
        {
            assert_eq!(summed.column(column), whole.column(column), "{name}: {column}");
        }
    }
    // A group whose rows disagree on a covariate: the row that differs is named.
    let mut disagreeing = parts.clone();
    disagreeing[4] = disagreeing[4].replace(",0.5,y", ",0.6,y");
    write(dir.path(), "parts.csv", &disagreeing.join("\n"));
    let args = args_for("parts.csv", &["--aggregate"], "bad.csv");
    assert_refused(
        dir.path(),
        &args,
        "row 4, column 'tenure': differs from the value of group 'b' on its first row (3)",
        "bad.csv",
    );
}

#[test]
fn the_pair_output_joins_back_on_the_covariates_and_counts() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", SELLERS);
    let out =
        ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind", "--pair-output", "pairs.csv"]));
    assert!(out.status.success(), "{}", stderr(&out));
    let (groups, pairs) = (Csv::read(&dir.path().join("out.csv")), Csv::read(&dir.path().join("pairs.csv")));
    assert_eq!(&pairs.header[..5], ["tenure", "kind", "good", "rated", "group_count"]);
    let key = |table: &Csv, i: usize| -> Vec<String> {
        ["tenure", "kind", "good", "rated"].iter().map(|c| table.column(c)[i].clone()).collect()
    };
    for i in 0..groups.rows.len() {
        let at = (0..pairs.rows.len()).find(|&j| key(&pairs, j) == key(&groups, i)).expect("a pair row");
        for column in ["prior_mean", "posterior_mean", "interval_lo", "interval_hi"] {
            assert_eq!(pairs.column(column)[at], groups.column(column)[i], "group {i}: {column}");
        }
    }
}

#[test]
fn corrected_intervals_spread_each_group_over_the_coefficients_uncertainty() {
    // Eight sellers estimate three coefficients and a strength poorly: the
    // corrected intervals, which integrate over that uncertainty, are wider
    // on average than the plug-in ones.
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "in.csv", SELLERS);
    let out =
        ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind", "--intervals", "corrected"]));
    assert!(out.status.success(), "{}", stderr(&out));
    let corrected = Csv::read(&dir.path().join("out.csv"));
    std::fs::remove_file(dir.path().join("out.csv")).unwrap();
    let out = ratepool(dir.path(), &seller_args(&["--covariates", "tenure,kind"]));
    assert!(out.status.success(), "{}", stderr(&out));
    let plug_in = Csv::read(&dir.path().join("out.csv"));
    let width = |t: &Csv| {
        let (lo, hi) = (t.floats("interval_lo"), t.floats("interval_hi"));
        lo.iter().zip(&hi).map(|(l, h)| h - l).sum::<f64>() / lo.len() as f64
    };
    assert!(width(&corrected) > 1.05 * width(&plug_in), "{} against {}", width(&corrected), width(&plug_in));
    assert_eq!(corrected.column("prior_mean"), plug_in.column("prior_mean"), "the same centres");
}

#[test]
fn a_repeated_id_is_left_out_whether_pass_2_finds_rows_by_their_record_or_by_the_index() {
    let dir = tempfile::tempdir().unwrap();
    let header = "seller,good,rated,tenure,kind\n";
    // Every row its own cell (pass 2 finds a row's cell by the row's record), and 48 rows
    // in 6 cells (by the index of cells, which is then the smaller).
    let distinct = SELLERS.trim_start_matches(header).to_string();
    let repeated: String = (0..48)
        .map(|i| format!("s{i},{},10,1.0,{}\n", [1, 9][(i / 3) % 2], ["x", "y", "z"][i % 3]))
        .collect();
    for (body, covariates) in [(distinct, "tenure,kind"), (repeated, "kind")] {
        write(dir.path(), "in.csv", &format!("{header}{body}"));
        let out = ratepool(dir.path(), &seller_args(&["--covariates", covariates]));
        assert!(out.status.success(), "{}", stderr(&out));
        let clean = std::fs::read(dir.path().join("out.csv")).unwrap();
        // The second row's id again after the third, in a cell of its own: taken back out,
        // which numbers the later cells again.
        let mut lines: Vec<&str> = body.lines().collect();
        let id = lines[1].split(',').next().unwrap().to_string();
        let again = format!("{id},2,7,0.3,x");
        lines.insert(3, &again);
        write(dir.path(), "in.csv", &format!("{header}{}\n", lines.join("\n")));
        let args = ["--covariates", covariates, "--on-invalid", "skip", "--rejects", "rejects.csv"];
        let out = ratepool(dir.path(), &seller_args(&args));
        assert!(out.status.success(), "{}", stderr(&out));
        let rejects = std::fs::read_to_string(dir.path().join("rejects.csv")).unwrap();
        assert!(rejects.contains(&format!("duplicate group id '{id}' (first at row 2)")), "{rejects}");
        assert_eq!(std::fs::read(dir.path().join("out.csv")).unwrap(), clean, "{covariates}");
    }
}

#[test]
fn covariate_columns_written_from_the_rows_are_those_written_per_pair() {
    // Without a pair table the output's covariate columns come from each row as
    // pass 2 reads it (the keys let go); with one, from each pair's key. The
    // two Parquet tables hold the same schema and values, with a number
    // column (one of its values −0), a level column and a logged one of
    // whole numbers.
    use arrow_array::RecordBatch;
    use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
    let dir = tempfile::tempdir().unwrap();
    let rows = "seller,good,rated,tenure,kind,floor\n\
        a,8,10,1,x,40\nb,3,9,0.5,y,12\nc,12,20,-0,x,80\nd,1,6,0.2,y,9\n\
        e,30,40,4.5,z,150\nf,7,12,2,z,35\ng,5,5,2.5,x,20\nh,2,8,0.7,y,14\n";
    write(dir.path(), "in.csv", rows);
    let read = |name: &str| -> Vec<RecordBatch> {
        let file = std::fs::File::open(dir.path().join(name)).unwrap();
        ParquetRecordBatchReaderBuilder::try_new(file).unwrap().build().unwrap().map(Result::unwrap).collect()
    };
    let mut tables = Vec::new();
    for extra in [&[][..], &["--pair-output", "pairs.parquet"][..]] {
        let mut args = seller_args(&["--covariates", "tenure,kind", "--covariates-log", "floor"]);
        let at = args.iter().position(|a| *a == "out.csv").unwrap();
        args[at] = "out.parquet";
        args.extend(extra);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        tables.push(read("out.parquet"));
    }
    assert_eq!(tables[0], tables[1]);
    let schema = tables[0][0].schema();
    let names: Vec<&str> = schema.fields().iter().map(|f| f.name().as_str()).collect();
    assert_eq!(&names[..6], ["seller", "tenure", "kind", "floor", "good", "rated"]);
    assert!(schema.fields().iter().take(6).all(|f| !f.is_nullable()));
    let types: Vec<String> = schema.fields().iter().take(4).map(|f| f.data_type().to_string()).collect();
    assert_eq!(types, ["Utf8", "Float64", "Utf8", "Int64"]);
}
