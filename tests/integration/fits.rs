//! End-to-end fits against reference fits from scipy and statsmodels.

use crate::util::{fixture, json_fixture, paired, ratepool, relative, stderr, summary, write, Csv};
use serde_json::Value;
use std::process::Output;

/// Fits a fixture with the given model and columns; returns the scratch
/// folder, the process output, the summary and the output table.
fn run_fit(input: &str, model: &str, columns: [&str; 3]) -> (tempfile::TempDir, Output, Value, Csv) {
    run_fit_with(input, model, columns, &[])
}

/// Fits a fixture with `extra` arguments; returns the folder, the process, the summary and the table.
fn run_fit_with(
    input: &str,
    model: &str,
    columns: [&str; 3],
    extra: &[&str],
) -> (tempfile::TempDir, Output, Value, Csv) {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture(input);
    let (count_flag, size_flag) =
        if model == "beta-binomial" { ("--successes", "--trials") } else { ("--events", "--exposure") };
    let mut args = vec!["fit", "--input", input.to_str().unwrap(), "--model", model, "--group", columns[0]];
    args.extend([
        count_flag,
        columns[1],
        size_flag,
        columns[2],
        "--output",
        "out.csv",
        "--summary",
        "summary.json",
    ]);
    args.extend(extra);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let s = summary(&dir.path().join("summary.json"));
    let table = Csv::read(&dir.path().join("out.csv"));
    (dir, out, s, table)
}

fn fit_beta_binomial(input: &str) -> (tempfile::TempDir, Value, Csv) {
    let (dir, _, s, table) = run_fit(input, "beta-binomial", ["unit", "hits", "tries"]);
    (dir, s, table)
}

/// Posterior means and interval ends against the reference's posteriors.
fn check_posteriors(table: &Csv, reference: &Value, tolerance: f64) {
    let reference = reference["posterior"].as_array().unwrap();
    let (mean, lo, hi) =
        (table.floats("posterior_mean"), table.floats("interval_lo"), table.floats("interval_hi"));
    assert_eq!(mean.len(), reference.len());
    for (i, r) in reference.iter().enumerate() {
        for (got, key) in [(mean[i], "mean"), (lo[i], "lower"), (hi[i], "upper")] {
            let expected = r[key].as_f64().unwrap();
            assert!(relative(got, expected) < tolerance, "row {i} {key}: {got} vs {expected}");
        }
    }
}

#[test]
fn beta_binomial_fit_matches_scipy_maximiser() {
    // Source: scipy.optimize.minimize on summed scipy.stats.betabinom.logpmf,
    // polished by Newton steps to a gradient of 2e-12.
    let reference = &json_fixture("fits.json")["beta_binomial"];
    let (_dir, s, table) = fit_beta_binomial("beta_binomial_groups.csv");
    let prior = &s["prior"];
    for key in ["alpha", "beta"] {
        let (got, expected) = (prior[key].as_f64().unwrap(), reference[key].as_f64().unwrap());
        assert!(relative(got, expected) < 1e-6, "{key}: {got} vs {expected}");
    }
    let ll = s["fit"]["log_marginal_likelihood"].as_f64().unwrap();
    assert!((ll - reference["log_marginal_likelihood"].as_f64().unwrap()).abs() < 1e-6);
    assert_eq!(s["fit"]["boundary"], "none");
    assert_eq!(s["fit"]["converged"], true);
    assert!(ll >= s["fit"]["start_log_marginal_likelihood"].as_f64().unwrap());
    // Intervals from scipy.stats.beta.ppf/isf at the reference posterior; the
    // two priors differ by ~1e-9, so 1e-6 bounds the propagated difference.
    check_posteriors(&table, reference, 1e-6);
}

/// Fits a gamma-Poisson fixture and compares it with a statsmodels NB2 fit.
fn check_against_statsmodels(key: &str, input: &str, columns: [&str; 3]) {
    let reference = &json_fixture("fits.json")[key];
    let (_dir, _, s, table) = run_fit(input, "gamma-poisson", columns);
    for key in ["shape", "rate"] {
        let (got, expected) = (s["prior"][key].as_f64().unwrap(), reference[key].as_f64().unwrap());
        assert!(relative(got, expected) < 1e-6, "{key}: {got} vs {expected}");
    }
    let ll = s["fit"]["log_marginal_likelihood"].as_f64().unwrap();
    assert!((ll - reference["log_marginal_likelihood"].as_f64().unwrap()).abs() < 1e-6, "{ll}");
    check_posteriors(&table, reference, 1e-6);
}

#[test]
fn gamma_poisson_fit_matches_statsmodels_negative_binomial() {
    // Source: statsmodels NegativeBinomial (nb2), intercept + offset log(expected).
    check_against_statsmodels("gamma_poisson", "gamma_poisson_areas.csv", ["area", "cases", "expected"]);
}

#[test]
fn open_cancer_county_data_matches_statsmodels() {
    // Source: statsmodels.datasets.cancer (Rice), exposure in thousands of people.
    check_against_statsmodels(
        "cancer_counties",
        "cancer_counties.csv",
        ["county", "deaths", "population_thousands"],
    );
}

#[test]
fn binomial_data_without_overdispersion_end_at_the_boundary_with_finite_output() {
    // Source: scipy.stats.binom.logpmf summed at the pooled rate.
    let reference = &json_fixture("fits.json")["binomial_boundary"];
    let (_dir, out, s, table) = run_fit("binomial_groups.csv", "beta-binomial", ["unit", "hits", "tries"]);
    assert!(stderr(&out).contains("infinite prior strength"), "{}", stderr(&out));
    assert_eq!(s["fit"]["boundary"], "no-overdispersion");
    assert!(s["prior"]["strength"].is_null());
    assert!(s["prior"]["alpha"].is_null());
    let mean = s["prior"]["mean"].as_f64().unwrap();
    assert!(relative(mean, reference["mean"].as_f64().unwrap()) < 1e-12);
    let ll = s["fit"]["log_marginal_likelihood"].as_f64().unwrap();
    assert!((ll - reference["log_likelihood"].as_f64().unwrap()).abs() < 1e-6);
    for v in table.floats("posterior_mean") {
        assert_eq!(v, mean);
    }
    assert!(table.floats("pool_weight").iter().all(|&w| w == 1.0));
    assert!(table.column("posterior_param_alpha").iter().all(|v| v.is_empty()));
}

#[test]
fn the_likelihood_ratio_against_complete_pooling_matches_scipy() {
    // Source: tests/fixtures/pooling.json (scripts/make_pooling_fixtures.py):
    // scipy.stats binom/poisson logpmf at the pooled rate, the fitted maxima
    // of fits.json, and scipy.stats.chi2.sf(x, 1) / 2 for the boundary null.
    let reference = json_fixture("pooling.json");
    let (_dir, s, _) = fit_beta_binomial("beta_binomial_groups.csv");
    let (_dir2, _, s2, _) =
        run_fit("gamma_poisson_areas.csv", "gamma-poisson", ["area", "cases", "expected"]);
    for (summary, key) in [(&s, "beta_binomial"), (&s2, "gamma_poisson")] {
        let test = &summary["fit"]["pooling_test"];
        let (statistic, p) = (test["statistic"].as_f64().unwrap(), test["p_value"].as_f64().unwrap());
        let want = &reference[key];
        assert!((statistic - want["statistic"].as_f64().unwrap()).abs() < 1e-5, "{key}: {statistic}");
        let want_p = want["p_value"].as_f64().unwrap();
        if want_p == 0.0 {
            assert!(p < 1e-300, "{key}: {p}");
        } else {
            assert!(relative(p, want_p) < 1e-6, "{key}: {p} vs {want_p}");
        }
    }
    // An ordinary p-value (the two above are far in the tail): 80 invented groups of mild
    // overdispersion (tests/fixtures/mild_overdispersion.csv, written by the same script),
    // fitted there by scipy's maximisers, p = 0.087.
    let (_dir4, _, s4, _) = run_fit("mild_overdispersion.csv", "beta-binomial", ["unit", "hits", "tries"]);
    let (test, want) = (&s4["fit"]["pooling_test"], &reference["mild_overdispersion"]);
    let want_p = want["p_value"].as_f64().unwrap();
    assert!((0.01..0.5).contains(&want_p), "an ordinary p-value: {want_p}");
    let statistic = test["statistic"].as_f64().unwrap();
    assert!((statistic - want["statistic"].as_f64().unwrap()).abs() < 1e-6, "{statistic}");
    assert!(relative(test["p_value"].as_f64().unwrap(), want_p) < 1e-6, "{test}");
    for (key, wanted) in [("alpha", "alpha"), ("beta", "beta")] {
        let got = s4["prior"][key].as_f64().unwrap();
        assert!(relative(got, want[wanted].as_f64().unwrap()) < 1e-5, "{key}: {got}");
    }
    // At the boundary the statistic is 0 and the p-value 1.
    let (_dir3, _, s3, _) = run_fit("binomial_groups.csv", "beta-binomial", ["unit", "hits", "tries"]);
    assert_eq!(s3["fit"]["pooling_test"]["statistic"], 0.0);
    assert_eq!(s3["fit"]["pooling_test"]["p_value"], 1.0);
    assert!(s3["fit"]["boundary_score"].as_f64().unwrap() <= 0.0, "the boundary is a maximum");
    assert_eq!(s3["fit"]["gradient_norm"], 0.0);
}

/// Scores the beta-binomial fixture with the prior file `prior` (in `dir`), corrected, with `extra`.
fn score_corrected(dir: &std::path::Path, prior: &str, output: &str, extra: &[&str]) -> Csv {
    let input = fixture("beta_binomial_groups.csv");
    let mut args =
        vec!["--quiet", "score", "--prior", prior, "--input", input.to_str().unwrap(), "--group", "unit"];
    args.extend(["--successes", "hits", "--trials", "tries", "--intervals", "corrected", "--output", output]);
    args.extend(extra);
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{}", stderr(&out));
    Csv::read(&dir.join(output))
}

#[test]
fn corrected_intervals_match_the_integrated_posterior_computed_with_scipy() {
    // Source: tests/fixtures/corrected.json (scripts/make_corrected_fixtures.py):
    // the covariance from a numerical Hessian of scipy's betabinom.logpmf sum,
    // numpy's Gauss-Hermite nodes centred on the fit, scipy's beta mixture and brentq.
    let reference = json_fixture("corrected.json");
    let (dir, _, s, table) = run_fit_with(
        "beta_binomial_groups.csv",
        "beta-binomial",
        ["unit", "hits", "tries"],
        &["--intervals", "corrected"],
    );
    assert_eq!(s["intervals"], "corrected");
    let cov = &s["fit"]["working_covariance"];
    for i in 0..2 {
        for j in 0..2 {
            let (got, want) = (cov[i][j].as_f64().unwrap(), reference["covariance"][i][j].as_f64().unwrap());
            assert!(relative(got, want) < 1e-4, "covariance [{i}][{j}]: {got} vs {want}");
        }
    }
    // The mixture centred on the fit itself: the same prior without its bootstrap bias.
    let bias: Vec<f64> =
        s["fit"]["working_bias"].as_array().unwrap().iter().map(|b| b.as_f64().unwrap()).collect();
    assert!(bias.iter().all(|b| b.is_finite()), "{bias:?}");
    let mut unbiased = s.clone();
    unbiased["fit"].as_object_mut().unwrap().remove("working_bias");
    write(dir.path(), "unbiased.json", &unbiased.to_string());
    let threshold = reference["threshold"].as_f64().unwrap().to_string();
    let centred = score_corrected(dir.path(), "unbiased.json", "centred.csv", &["--above", &threshold]);
    for (column, key) in [("posterior_sd", "sd"), ("interval_lo", "lower"), ("interval_hi", "upper")] {
        for (got, want) in paired(&centred.floats(column), reference[key].as_array().unwrap(), column) {
            let want = want.as_f64().unwrap();
            assert!(relative(*got, want) < 1e-4, "{column}: {got} vs {want}");
        }
    }
    // Exceedance integrates the prior's uncertainty out as the intervals do
    // (the mixture's P(rate > T) at the prior mean, from scipy's beta sf).
    for (got, want) in
        paired(&centred.floats("prob_above"), reference["prob_above"].as_array().unwrap(), "prob_above")
    {
        let want = want.as_f64().unwrap();
        assert!((got - want).abs() < 1e-6 + 1e-4 * want, "prob_above: {got} vs {want}");
    }
    // With the bias, the nodes are centred on the fit less it: the same
    // intervals as the unbiased mixture around the prior at u − bias.
    let (alpha, beta) = (s["prior"]["alpha"].as_f64().unwrap(), s["prior"]["beta"].as_f64().unwrap());
    let u = [(alpha / beta).ln() - bias[0], (alpha + beta).ln() - bias[1]];
    let (mean, strength) = (1.0 / (1.0 + (-u[0]).exp()), u[1].exp());
    let mut moved = unbiased.clone();
    moved["prior"]["alpha"] = serde_json::json!(mean * strength);
    moved["prior"]["beta"] = serde_json::json!((1.0 - mean) * strength);
    write(dir.path(), "moved.json", &moved.to_string());
    let shifted = score_corrected(dir.path(), "moved.json", "moved.csv", &[]);
    for column in ["interval_lo", "interval_hi", "posterior_sd"] {
        for (got, &want) in paired(&table.floats(column), &shifted.floats(column), column) {
            assert!(relative(*got, want) < 1e-9, "{column}: {got} vs {want}");
        }
    }
    // The bootstrap is seeded: the same bias again.
    let (_dir4, _, again, _) = run_fit_with(
        "beta_binomial_groups.csv",
        "beta-binomial",
        ["unit", "hits", "tries"],
        &["--intervals", "corrected"],
    );
    assert_eq!(again["fit"]["working_bias"], s["fit"]["working_bias"]);
    // Wider than the plug-in intervals: the uncertainty of the prior adds to the group's own.
    let (_dir2, _, _, plug) = run_fit("beta_binomial_groups.csv", "beta-binomial", ["unit", "hits", "tries"]);
    let width = |t: &Csv| -> Vec<f64> {
        t.floats("interval_hi").iter().zip(t.floats("interval_lo")).map(|(h, l)| h - l).collect()
    };
    let (total_corrected, total_plug): (f64, f64) = (width(&table).iter().sum(), width(&plug).iter().sum());
    assert!(total_corrected > total_plug, "{total_corrected} vs {total_plug}");
}

#[test]
fn score_reuses_the_saved_covariance_and_refuses_a_summary_without_one() {
    let (dir, _, mut s, _) = run_fit_with(
        "beta_binomial_groups.csv",
        "beta-binomial",
        ["unit", "hits", "tries"],
        &["--intervals", "corrected"],
    );
    let input = fixture("beta_binomial_groups.csv");
    let score = |prior: &str, output: &str| {
        let args = ["score", "--prior", prior, "--input", input.to_str().unwrap(), "--group", "unit"];
        let mut args = args.to_vec();
        args.extend([
            "--successes",
            "hits",
            "--trials",
            "tries",
            "--intervals",
            "corrected",
            "--output",
            output,
        ]);
        ratepool(dir.path(), &args)
    };
    let out = score("summary.json", "again.csv");
    assert!(out.status.success(), "{}", stderr(&out));
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("again.csv"), read("out.csv"), "the saved covariance gives the same intervals");
    s["fit"].as_object_mut().unwrap().remove("working_covariance");
    std::fs::write(dir.path().join("old.json"), s.to_string()).unwrap();
    let out = score("old.json", "old.csv");
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("covariance is not saved"), "{}", stderr(&out));
    assert!(!dir.path().join("old.csv").exists());
}

#[test]
fn corrected_intervals_as_shipped_match_an_outside_mixture_for_every_model() {
    // Source: tests/fixtures/corrected/<model>.json, written by
    // scripts/make_corrected_interval_fixtures.py: from the summary ratepool saved
    // (<model>-prior.json: the prior, the covariance of its working coordinates and
    // the bootstrap bias), numpy's Gauss-Hermite nodes and scipy's beta, gamma and
    // normal posteriors mixed over them, interval ends by brentq on the mixture CDF.
    for model in ["beta-binomial", "gamma-poisson", "normal-normal"] {
        let reference = json_fixture(&format!("corrected/{model}.json"));
        let prior = fixture(&format!("corrected/{model}-prior.json"));
        let input =
            std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join(reference["input"].as_str().unwrap());
        let saved = summary(&prior);
        assert!(saved["fit"]["working_bias"].is_array(), "{model}: the bias as shipped is in the prior");
        let columns = saved["columns"].clone();
        let column = |role: &str| columns[role].as_str().unwrap().to_string();
        let (count_option, size_option) = match model {
            "beta-binomial" => ("--successes", "--trials"),
            "gamma-poisson" => ("--events", "--exposure"),
            _ => ("--estimate", "--std-error"),
        };
        let dir = tempfile::tempdir().unwrap();
        let threshold = reference["threshold"].as_f64().unwrap().to_string();
        let (group, count, size) = (column("group"), column("count"), column("size"));
        let args = [
            "--quiet",
            "score",
            "--prior",
            prior.to_str().unwrap(),
            "--input",
            input.to_str().unwrap(),
            "--group",
            &group,
            count_option,
            &count,
            size_option,
            &size,
            "--intervals",
            "corrected",
            "--above",
            &threshold,
            "--output",
            "scored.csv",
        ];
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{model}: {}", stderr(&out));
        let table = Csv::read(&dir.path().join("scored.csv"));
        let close =
            |got: f64, want: f64, tolerance: f64| (got - want).abs() <= tolerance * want.abs().max(1.0);
        for (column, key, tolerance) in [
            ("interval_lo", "lower", 1e-8),
            ("interval_hi", "upper", 1e-8),
            ("posterior_mean", "mean", 1e-12),
            ("posterior_sd", "sd", 1e-10),
            ("prob_above", "prob_above", 1e-12),
        ] {
            let values = table.floats(column);
            for (i, (got, want)) in paired(&values, reference[key].as_array().unwrap(), column).enumerate() {
                let want = want.as_f64().unwrap();
                assert!(close(*got, want, tolerance), "{model} row {}: {column} {got} vs {want}", i + 1);
            }
        }
    }
}
