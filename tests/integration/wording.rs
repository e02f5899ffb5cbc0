//! How ratepool talks to a first-time user: names that say what a column
//! holds, help that fits the screen, numbers written for people, and a
//! clear answer to each ordinary mistake (exit code and words).

use crate::util::{ratepool, stderr, summary, write, Csv};
use std::path::Path;

fn demo(name: &str) -> String {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join(name).to_str().unwrap().to_string()
}

fn marketplace_fit(dir: &Path, extra: &[&str]) -> std::process::Output {
    let input = demo("marketplace.csv");
    let mut args = vec!["fit", "--input", &input, "--model", "beta-binomial", "--group", "seller_id"];
    args.extend(["--successes", "positive_ratings", "--trials", "total_ratings"]);
    args.extend(extra);
    ratepool(dir, &args)
}

fn districts_fit(dir: &Path, extra: &[&str]) -> std::process::Output {
    let input = demo("districts.csv");
    let mut args = vec!["fit", "--input", &input, "--model", "gamma-poisson", "--group", "district_id"];
    args.extend(["--events", "observed_cases", "--exposure", "expected_cases"]);
    args.extend(extra);
    ratepool(dir, &args)
}

#[test]
fn each_model_names_its_raw_value_and_posterior_parameters_in_its_own_words() {
    let dir = tempfile::tempdir().unwrap();
    let out = marketplace_fit(dir.path(), &["--quiet", "--output", "m.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let header = Csv::read(&dir.path().join("m.csv")).header;
    for name in ["raw_proportion", "posterior_mean", "posterior_param_alpha", "posterior_param_beta"] {
        assert!(header.iter().any(|h| h == name), "{name} in {header:?}");
    }
    let out = districts_fit(dir.path(), &["--quiet", "--output", "d.csv"]);
    assert!(out.status.success(), "{}", stderr(&out));
    let header = Csv::read(&dir.path().join("d.csv")).header;
    for name in ["raw_rate", "posterior_mean", "posterior_param_shape", "posterior_param_inverse_scale"] {
        assert!(header.iter().any(|h| h == name), "{name} in {header:?}");
    }
    // No column of a gamma-Poisson run may read as a smoothed rate but the posterior mean.
    assert!(!header.iter().any(|h| h == "posterior_rate"), "{header:?}");
    let input = demo("clinic_waits.csv");
    let args = [
        "fit",
        "--quiet",
        "--input",
        &input,
        "--model",
        "normal-normal",
        "--group",
        "clinic_id",
        "--estimate",
        "mean_wait_minutes",
        "--std-error",
        "wait_se",
        "--output",
        "c.csv",
    ];
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let header = Csv::read(&dir.path().join("c.csv")).header;
    for name in ["raw_estimate", "posterior_param_mean", "posterior_param_variance"] {
        assert!(header.iter().any(|h| h == name), "{name} in {header:?}");
    }
    assert!(!header.iter().any(|h| h.contains("rate")), "a waiting time is not a rate: {header:?}");
}

#[test]
fn the_summary_says_prior_and_its_version_and_one_order_for_ranks_and_top() {
    let dir = tempfile::tempdir().unwrap();
    let extra = ["--quiet", "--above", "1", "--flag-fdr", "0.1", "--top", "5", "--rank-lowest-first"];
    let mut args = extra.to_vec();
    args.extend(["--output", "d.csv", "--summary", "d.json"]);
    let out = districts_fit(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let s = summary(&dir.path().join("d.json"));
    assert_eq!(s["format_version"], 2);
    assert!(s["prior"]["shape"].as_f64().unwrap() > 0.0);
    assert!(s.get("hyperprior").is_none());
    assert_eq!(s["flags"]["fdr_level"], 0.1);
    assert!(s["flags"].get("bound").is_none());
    assert_eq!(s["rank_order"], "lowest-first");
    assert!(s["top"].get("best").is_none(), "the order is said once, in rank_order");
}

#[test]
fn a_summary_written_with_the_old_keys_is_read_back_by_score() {
    let dir = tempfile::tempdir().unwrap();
    let extra =
        ["--quiet", "--above", "1", "--flag-fdr", "0.1", "--output", "d.csv", "--summary", "new.json"];
    let out = districts_fit(dir.path(), &extra);
    assert!(out.status.success(), "{}", stderr(&out));
    // Version 1 of the layout: no format_version, the prior under `hyperprior`, Q under `flags.bound`.
    let mut old = summary(&dir.path().join("new.json"));
    let object = old.as_object_mut().unwrap();
    object.remove("format_version");
    let prior = object.remove("prior").unwrap();
    object.insert("hyperprior".into(), prior);
    let flags = object["flags"].as_object_mut().unwrap();
    let level = flags.remove("fdr_level").unwrap();
    flags.insert("bound".into(), level);
    write(dir.path(), "old.json", &old.to_string());
    let input = demo("districts.csv");
    for (prior, output) in [("new.json", "from_new.csv"), ("old.json", "from_old.csv")] {
        let args = [
            "score",
            "--quiet",
            "--prior",
            prior,
            "--input",
            &input,
            "--group",
            "district_id",
            "--events",
            "observed_cases",
            "--exposure",
            "expected_cases",
            "--above",
            "1",
            "--output",
            output,
        ];
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{prior}: {}", stderr(&out));
    }
    let (new, old) = (dir.path().join("from_new.csv"), dir.path().join("from_old.csv"));
    assert_eq!(std::fs::read(new).unwrap(), std::fs::read(old).unwrap());
}
