//! Numerical extremes, end to end. Reference fits at the edges come from
//! `tests/fixtures/edges.json` (mpmath log likelihoods maximised with scipy,
//! `scripts/make_edge_fixtures.py`); degenerate data sets have defined
//! outcomes, each checked with a textbook value beside it.

use crate::util::{json_fixture, ratepool, relative, stderr, summary, Csv};
use serde_json::Value;
use std::path::Path;

/// Fits `csv` (columns id, k, n or id, y, e) and returns the exit code, stderr,
/// the summary (if written) and the table (if written).
fn fit_csv(model: &str, csv: &str) -> (Option<i32>, String, Option<Value>, Option<Csv>) {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("in.csv"), csv).unwrap();
    let columns: [&str; 4] = if model == "beta-binomial" {
        ["--successes", "k", "--trials", "n"]
    } else {
        ["--events", "y", "--exposure", "e"]
    };
    let head = ["--quiet", "fit", "--model", model, "--input", "in.csv", "--group", "id"];
    let tail = ["--output", "out.csv", "--summary", "s.json"];
    let args: Vec<&str> = head.into_iter().chain(columns).chain(tail).collect();
    let out = ratepool(dir.path(), &args);
    let read = |name: &str| dir.path().join(name);
    let found = |p: &Path| p.exists();
    (
        out.status.code(),
        stderr(&out),
        found(&read("s.json")).then(|| summary(&read("s.json"))),
        found(&read("out.csv")).then(|| Csv::read(&read("out.csv"))),
    )
}

fn assert_finite_table(table: &Csv) {
    for column in ["posterior_mean", "posterior_sd", "interval_lo", "interval_hi", "pool_weight"] {
        for v in table.floats(column) {
            assert!(v.is_finite(), "{column}: {v}");
        }
    }
}

fn case(name: &str) -> Value {
    json_fixture("edges.json")["cases"][name].clone()
}

fn beta_binomial_csv(rows: &Value) -> String {
    let mut csv = String::from("id,k,n\n");
    for (i, r) in rows.as_array().unwrap().iter().enumerate() {
        csv.push_str(&format!("g{i},{},{}\n", r["successes"], r["trials"]));
    }
    csv
}

/// The fitted prior against the reference: hyperparameters within 1e-6
/// relative, log marginal likelihood within `ll_tolerance`.
fn assert_reference_fit(s: &Value, reference: &Value, names: [&str; 2], ll_tolerance: f64) {
    for name in names {
        let (got, expected) = (s["prior"][name].as_f64().unwrap(), reference[name].as_f64().unwrap());
        assert!(relative(got, expected) < 1e-6, "{name}: {got} vs reference {expected}");
    }
    let (got, expected) = (
        s["fit"]["log_marginal_likelihood"].as_f64().unwrap(),
        reference["log_marginal_likelihood"].as_f64().unwrap(),
    );
    assert!((got - expected).abs() < ll_tolerance, "log marginal likelihood {got} vs {expected}");
}

/// Fits a reference case and checks the prior and a finite table.
fn assert_case_fits(model: &str, name: &str, parameters: [&str; 2]) {
    let reference = case(name);
    let rows = reference["rows"].as_array().unwrap();
    let csv: String = if model == "beta-binomial" {
        beta_binomial_csv(&reference["rows"])
    } else {
        let lines = rows.iter().enumerate().map(|(i, r)| format!("a{i},{},{}\n", r["events"], r["exposure"]));
        std::iter::once("id,y,e\n".to_string()).chain(lines).collect()
    };
    let (code, message, s, table) = fit_csv(model, &csv);
    assert_eq!(code, Some(0), "{name}: {message}");
    assert_reference_fit(&s.unwrap(), &reference, parameters, 1e-6);
    assert_finite_table(&table.unwrap());
}

#[test]
fn a_strength_near_1e8_with_trials_up_to_1e12_matches_the_reference() {
    assert_case_fits("beta-binomial", "strength_near_1e8", ["alpha", "beta"]);
}

#[test]
fn a_strength_near_1e_minus_3_with_zero_and_all_successes_matches_the_reference() {
    assert_case_fits("beta-binomial", "strength_near_1e-3", ["alpha", "beta"]);
}

#[test]
fn exposures_from_1e_minus_6_to_1e9_match_the_reference() {
    assert_case_fits("gamma-poisson", "exposures_1e-6_to_1e9", ["shape", "rate"]);
}

#[test]
fn a_single_group_is_pooled_completely_at_its_own_rate() {
    // With one group there is no spread to measure: the marginal likelihood is
    // maximised at infinite strength, and the pooled rate is the group's k/n.
    let (code, message, s, table) = fit_csv("beta-binomial", "id,k,n\nonly,3,10\n");
    assert_eq!(code, Some(0), "{message}");
    let s = s.unwrap();
    assert_eq!(s["fit"]["boundary"], "no-overdispersion");
    assert_eq!(s["prior"]["mean"].as_f64().unwrap(), 0.3);
    let table = table.unwrap();
    assert_eq!(table.floats("posterior_mean"), vec![0.3]);
    assert_finite_table(&table);
}

#[test]
fn identical_groups_show_no_overdispersion_and_keep_the_common_rate() {
    let csv: String =
        std::iter::once("id,k,n\n".to_string()).chain((0..50).map(|i| format!("g{i},5,10\n"))).collect();
    let (code, message, s, table) = fit_csv("beta-binomial", &csv);
    assert_eq!(code, Some(0), "{message}");
    let s = s.unwrap();
    assert_eq!(s["fit"]["boundary"], "no-overdispersion");
    assert!(!s["warnings"].as_array().unwrap().is_empty(), "the boundary is flagged");
    let table = table.unwrap();
    assert!(table.floats("posterior_mean").iter().all(|&m| (m - 0.5).abs() < 1e-15));
    assert_finite_table(&table);
}

#[test]
fn two_groups_give_a_defined_outcome() {
    // Far apart: a finite strength fits, and each posterior mean lies between
    // its raw rate and the pooled mean (the posterior is a blend).
    let (code, message, s, table) = fit_csv("beta-binomial", "id,k,n\na,2,40\nb,38,40\n");
    assert_eq!(code, Some(0), "{message}");
    let s = s.unwrap();
    assert_eq!(s["fit"]["boundary"], "none");
    let mean = s["prior"]["mean"].as_f64().unwrap();
    assert!((mean - 0.5).abs() < 1e-9, "symmetric data, symmetric prior: {mean}");
    let posts = table.unwrap().floats("posterior_mean");
    assert!(posts[0] > 0.05 && posts[0] < 0.5 && posts[1] > 0.5 && posts[1] < 0.95, "{posts:?}");
    // Close together: within sampling noise, so complete pooling, flagged.
    let (code, message, s, _) = fit_csv("beta-binomial", "id,k,n\na,19,40\nb,21,40\n");
    assert_eq!(code, Some(0), "{message}");
    assert_eq!(s.unwrap()["fit"]["boundary"], "no-overdispersion");
}

#[test]
fn every_group_without_events_cannot_be_fitted_and_says_why() {
    let (code, message, s, table) = fit_csv("gamma-poisson", "id,y,e\na,0,1.5\nb,0,1e-6\nc,0,1e9\n");
    assert_eq!(code, Some(3), "{message}");
    assert!(message.contains("pooled rate is 0"), "{message}");
    assert!(s.is_none() && table.is_none());
}
