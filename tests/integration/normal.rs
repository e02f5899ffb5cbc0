//! The normal-normal model end to end: fits against a general-purpose
//! optimiser (scipy), the closed forms of equal standard errors, the
//! James–Stein worked example of Efron and Morris, the tau^2 = 0 boundary,
//! and refusals of bad estimates and standard errors.

use crate::util::{assert_refused, fixture, json_fixture, ratepool, relative, stderr, summary, write, Csv};
use serde_json::Value;
use std::path::Path;

/// Fits `input` (a path) in `dir` with the normal-normal model; returns the summary and table.
fn fit_normal(dir: &Path, input: &str, columns: [&str; 3], extra: &[&str]) -> (Value, Csv) {
    let mut args = vec!["fit", "--model", "normal-normal", "--input", input, "--group", columns[0]];
    args.extend(["--estimate", columns[1], "--std-error", columns[2]]);
    args.extend(["--output", "out.csv", "--summary", "s.json"]);
    args.extend(extra);
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{}", stderr(&out));
    (summary(&dir.join("s.json")), Csv::read(&dir.join("out.csv")))
}

fn number(value: &Value, key: &str) -> f64 {
    value[key].as_f64().unwrap_or_else(|| panic!("{key} missing in {value}"))
}

/// The fit and the first groups' posteriors against the scipy reference.
fn check_against_reference(method: &str, extra: &[&str]) {
    // Source: scripts/make_normal_fixtures.py: the log likelihoods written in
    // numpy, maximised by scipy.optimize.minimize_scalar and polished by
    // brentq on the profile score; standard errors by statsmodels' approx_hess3.
    let reference = &json_fixture("normal.json")["groups"][method];
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("normal_groups.csv");
    let columns = ["clinic", "wait_minutes", "wait_se"];
    let mut args = vec!["--above", "20"];
    args.extend(extra);
    let (s, table) = fit_normal(dir.path(), input.to_str().unwrap(), columns, &args);
    let prior = &s["prior"];
    assert!(relative(number(prior, "mean"), number(reference, "mean")) < 1e-9, "{prior}");
    assert!(relative(number(prior, "variance"), number(reference, "variance")) < 1e-8, "{prior}");
    assert!(relative(number(prior, "strength"), 1.0 / number(reference, "variance")) < 1e-8);
    // Numerical second derivatives: about six digits.
    assert!(relative(number(prior, "mean_se"), number(reference, "mean_se")) < 1e-5, "{prior}");
    assert!(relative(number(prior, "variance_se"), number(reference, "variance_se")) < 1e-5, "{prior}");
    let fit = &s["fit"];
    let ll = number(fit, "log_marginal_likelihood");
    assert!((ll - number(reference, "log_marginal_likelihood")).abs() < 1e-9, "{ll}");
    assert_eq!(fit["boundary"], "none");
    assert_eq!(fit["likelihood"], if method == "ml" { "marginal" } else { "restricted" });
    if method == "reml" {
        let restricted = number(fit, "restricted_log_likelihood");
        assert!((restricted - number(reference, "restricted_log_likelihood")).abs() < 1e-9);
    }
    let posteriors = reference["posteriors"].as_array().unwrap();
    for (i, r) in posteriors.iter().enumerate() {
        for column in ["pool_weight", "posterior_mean", "posterior_sd", "interval_lo", "interval_hi"] {
            let got = table.floats(column)[i];
            assert!(relative(got, number(r, column)) < 1e-8, "row {i} {column}: {got} vs {}", r[column]);
        }
        let above = table.floats("prob_above")[i];
        assert!(
            relative(above, number(r, "prob_above_20")) < 1e-7,
            "row {i}: {above} vs {}",
            r["prob_above_20"]
        );
        assert_eq!(table.floats("raw_estimate")[i], number(r, "estimate"), "the raw value is the estimate");
    }
}

#[test]
fn the_maximum_likelihood_fit_matches_a_general_purpose_optimiser() {
    check_against_reference("ml", &[]);
}

#[test]
fn the_restricted_fit_matches_a_general_purpose_optimiser() {
    check_against_reference("reml", &["--variance-method", "reml"]);
}

#[test]
fn estimates_that_vary_less_than_their_errors_say_end_at_the_boundary() {
    // Source: scripts/make_normal_fixtures.py, normal_boundary.csv: both
    // profile likelihoods are largest at tau^2 = 0, and mu is then the
    // inverse-variance weighted mean with standard error 1/sqrt(sum 1/s^2).
    let boundary = &json_fixture("normal.json")["boundary"];
    for (method, extra) in [("ml", vec![]), ("reml", vec!["--variance-method", "reml"])] {
        let reference = &boundary[method];
        let dir = tempfile::tempdir().unwrap();
        let input = fixture("normal_boundary.csv");
        let columns = ["clinic", "wait_minutes", "wait_se"];
        let (s, table) = fit_normal(dir.path(), input.to_str().unwrap(), columns, &extra);
        let prior = &s["prior"];
        assert_eq!(prior["variance"], 0.0, "{method}");
        assert!(prior["strength"].is_null());
        assert!(relative(number(prior, "mean"), number(reference, "mean")) < 1e-12);
        assert!(relative(number(prior, "mean_se"), number(reference, "mean_se")) < 1e-12);
        assert_eq!(s["fit"]["boundary"], "no-overdispersion");
        assert!(number(&s["fit"], "boundary_score") <= 0.0);
        assert_eq!(s["fit"]["pooling_test"]["p_value"], 1.0);
        // Every group gets the pooled mean, pool weight 1 (complete pooling).
        assert!(table.floats("pool_weight").iter().all(|&b| b == 1.0));
        assert!(table.floats("posterior_mean").iter().all(|&m| m == number(prior, "mean")));
        let ll = number(&s["fit"], "log_marginal_likelihood");
        assert!((ll - number(reference, "log_marginal_likelihood")).abs() < 1e-10, "{method}");
    }
}

/// The batting averages of 18 players after their first 45 at bats, 1970
/// (Efron and Morris, JASA 1975, table 1; hits from memory of that table and
/// of Efron and Morris, Scientific American 1977, which checks them: the
/// grand average .265, the shrinking factor c = .212 and Clemente's
/// James–Stein estimate .294 all follow from them).
const HITS_IN_45: [u32; 18] = [18, 17, 16, 15, 14, 14, 13, 12, 11, 11, 10, 10, 10, 10, 10, 9, 8, 7];

/// The batting averages as estimates with the binomial standard error at
/// the grand average, equal for all players as in the published example.
fn batting_averages(dir: &Path) -> (String, Vec<f64>, f64) {
    let averages: Vec<f64> = HITS_IN_45.iter().map(|&h| f64::from(h) / 45.0).collect();
    let grand = averages.iter().sum::<f64>() / 18.0;
    let se = (grand * (1.0 - grand) / 45.0).sqrt();
    let mut text = String::from("player,average,se\n");
    for (i, a) in averages.iter().enumerate() {
        text.push_str(&format!("p{i},{a},{se}\n"));
    }
    (write(dir, "batting.csv", &text), averages, se)
}

#[test]
fn equal_standard_errors_give_the_closed_forms_and_the_james_stein_example() {
    let dir = tempfile::tempdir().unwrap();
    let (input, averages, se) = batting_averages(dir.path());
    let k = averages.len() as f64;
    let grand = averages.iter().sum::<f64>() / k;
    let spread: f64 = averages.iter().map(|a| (a - grand).powi(2)).sum();
    let columns = ["player", "average", "se"];
    // Closed forms with equal s² (handbook algebra, common practice): mu is
    // the plain average; tau² = S/k − s² by ML and S/(k − 1) − s² by REML.
    for (extra, divisor) in [(vec![], k), (vec!["--variance-method", "reml"], k - 1.0)] {
        let (s, table) = fit_normal(dir.path(), &input, columns, &extra);
        let prior = &s["prior"];
        assert!(relative(number(prior, "mean"), grand) < 1e-12, "{prior}");
        let tau2 = spread / divisor - se * se;
        assert!(relative(number(prior, "variance"), tau2) < 1e-9, "{prior} vs {tau2}");
        // Every player has the pool weight s²/(s² + tau²).
        for b in table.floats("pool_weight") {
            assert!(relative(b, se * se / (se * se + tau2)) < 1e-9);
        }
        std::fs::remove_file(dir.path().join("out.csv")).unwrap();
        std::fs::remove_file(dir.path().join("s.json")).unwrap();
    }
    // The ML pool weight is k s²/S; James–Stein's is (k − 3) s²/S, so the
    // published shrinking factor c = 1 − (k − 3)/k · B follows from the fit.
    let (s, table) = fit_normal(dir.path(), &input, columns, &[]);
    let b = table.floats("pool_weight")[0];
    let c = 1.0 - (k - 3.0) / k * b;
    assert_eq!((c * 1000.0).round() / 1000.0, 0.212, "c = {c}");
    let clemente = number(&s["prior"], "mean") + c * (averages[0] - grand);
    assert_eq!((clemente * 1000.0).round() / 1000.0, 0.294, "{clemente}");
    assert_eq!((grand * 1000.0).round() / 1000.0, 0.265);
}

#[test]
fn bad_estimates_and_standard_errors_are_refused_naming_row_and_column() {
    let dir = tempfile::tempdir().unwrap();
    let cases = [
        ("a,1.5,0\n", "wait_se", "standard error 0 is not above zero"),
        ("a,1.5,-0.2\n", "wait_se", "standard error -0.2 is not above zero"),
        ("a,1.5,\n", "wait_se", "missing value"),
        ("a,1.5,inf\n", "wait_se", "not a finite number"),
        ("a,NaN,1\n", "wait_minutes", "not a finite number"),
        ("a,,1\n", "wait_minutes", "missing value"),
        ("a,fast,1\n", "wait_minutes", "'fast' is not a number"),
    ];
    for (row, column, reason) in cases {
        let input = write(dir.path(), "bad.csv", &format!("clinic,wait_minutes,wait_se\nz,2.0,1.0\n{row}"));
        let args = [
            "fit",
            "--model",
            "normal-normal",
            "--input",
            &input,
            "--group",
            "clinic",
            "--estimate",
            "wait_minutes",
            "--std-error",
            "wait_se",
            "--output",
            "out.csv",
        ];
        let out = ratepool(dir.path(), &args);
        assert_eq!(out.status.code(), Some(2), "{row}: {}", stderr(&out));
        let message = stderr(&out);
        assert!(
            message.contains("row 2") && message.contains(column) && message.contains(reason),
            "{row}: {message}"
        );
        assert!(!dir.path().join("out.csv").exists());
    }
}

#[test]
fn options_of_other_models_and_summing_rows_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("normal_groups.csv");
    let input = input.to_str().unwrap();
    let base = ["fit", "--model", "normal-normal", "--input", input, "--group", "clinic"];
    let with = |more: &[&'static str]| -> Vec<&str> {
        let mut args = base.to_vec();
        args.extend(["--estimate", "wait_minutes", "--std-error", "wait_se", "--output", "out.csv"]);
        args.extend(more);
        args
    };
    assert_refused(dir.path(), &with(&["--aggregate"]), "cannot be summed", "out.csv");
    assert_refused(dir.path(), &with(&["--outcome", "x"]), "--outcome does not apply", "out.csv");
    assert_refused(dir.path(), &with(&["--trials", "n"]), "--trials does not apply", "out.csv");
    let mut reml = vec!["fit", "--model", "beta-binomial", "--input", input, "--group", "clinic"];
    reml.extend(["--successes", "a", "--trials", "b", "--output", "out.csv", "--variance-method", "reml"]);
    assert_refused(dir.path(), &reml, "applies to the normal-normal model", "out.csv");
    let mut missing = base.to_vec();
    missing.extend(["--estimate", "wait_minutes", "--output", "out.csv"]);
    assert_refused(dir.path(), &missing, "needs --std-error", "out.csv");
}

#[test]
fn thresholds_may_be_negative_and_a_saved_prior_scores_new_estimates() {
    let dir = tempfile::tempdir().unwrap();
    // Effect sizes around zero, of either sign.
    let mut text = String::from("study,effect,se\n");
    for i in 0..40 {
        let effect = -0.3 + 0.02 * f64::from(i % 17) - 0.01 * f64::from(i % 5);
        text.push_str(&format!("s{i},{effect},{}\n", 0.05 + 0.01 * f64::from(i % 7)));
    }
    let input = write(dir.path(), "effects.csv", &text);
    let columns = ["study", "effect", "se"];
    let extra =
        ["--below", "-0.2", "--flag-fdr", "0.1", "--ranks", "--top", "3", "--top-method", "threshold"];
    let extra = [&extra[..], &["--intervals", "corrected"]].concat();
    let (s, table) = fit_normal(dir.path(), &input, columns, &extra);
    assert!(number(&s["prior"], "mean") < 0.0);
    let below = table.floats("prob_below");
    assert!(below.iter().all(|p| (0.0..=1.0).contains(p)));
    // The threshold c has K groups expected beyond it, so prob_top sums to
    // K; the values are negative, so c is found below zero.
    let top: f64 = table.floats("prob_top").iter().sum();
    assert!((top - 3.0).abs() < 1e-6, "{top}");
    assert!(s["top"]["threshold"].as_f64().unwrap() < 0.0, "{}", s["top"]);
    // Corrected intervals are at least as wide as plug-in ones.
    let plug_dir = tempfile::tempdir().unwrap();
    let plug_input = write(plug_dir.path(), "effects.csv", &text);
    let (_, plug) = fit_normal(plug_dir.path(), &plug_input, columns, &[]);
    for i in 0..40 {
        let wide = table.floats("interval_hi")[i] - table.floats("interval_lo")[i];
        let narrow = plug.floats("interval_hi")[i] - plug.floats("interval_lo")[i];
        assert!(wide >= narrow * (1.0 - 1e-12), "row {i}: {wide} < {narrow}");
    }
    // Score the same rows with the saved prior: the same posteriors.
    let args = [
        "score",
        "--prior",
        "s.json",
        "--input",
        &input,
        "--group",
        "study",
        "--estimate",
        "effect",
        "--std-error",
        "se",
        "--output",
        "scored.csv",
        "--summary",
        "scored.json",
    ];
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let scored = Csv::read(&dir.path().join("scored.csv"));
    assert_eq!(scored.floats("posterior_mean"), plug.floats("posterior_mean"));
    assert_eq!(summary(&dir.path().join("scored.json"))["prior"], s["prior"]);
}
