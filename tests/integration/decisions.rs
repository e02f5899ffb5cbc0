//! Decisions over the scored table: flags under the posterior
//! false-discovery rate, checked against a reference computed outside
//! ratepool, and the refusals of bad requests.

use crate::util::{json_fixture, paired, ratepool, stderr, summary, write, Csv};
use serde_json::Value;
use std::path::Path;

/// The column options of a model in the fixtures' CSV (`id,count,size`).
fn column_args(model: &str) -> [&'static str; 4] {
    match model {
        "beta-binomial" => ["--successes", "count", "--trials", "size"],
        _ => ["--events", "count", "--exposure", "size"],
    }
}

/// A summary holding `prior` for `model`, made by fitting the groups and
/// replacing the fitted prior's two parameters.
fn saved_prior(dir: &Path, model: &str, prior: &[f64]) -> String {
    let mut args = vec!["fit", "--model", model, "--input", "groups.csv", "--group", "id"];
    args.extend(column_args(model));
    args.extend(["--output", "fitted.csv", "--summary", "fitted.json", "--quiet"]);
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let mut saved = summary(&dir.join("fitted.json"));
    let names = if model == "beta-binomial" { ["alpha", "beta"] } else { ["shape", "rate"] };
    for (name, value) in names.iter().zip(prior) {
        saved["prior"][*name] = Value::from(*value);
    }
    write(dir, "prior.json", &saved.to_string())
}

#[test]
fn flags_match_the_direct_posterior_probability_rule_computed_with_scipy() {
    // Source: tests/fixtures/flags.json, written by scripts/make_flag_fixtures.py:
    // scipy.stats tail probabilities at a fixed prior and the rule of Newton,
    // Noueiry, Sarkar and Ahlquist (Biostatistics 2004) in numpy.
    for case in json_fixture("flags.json")["cases"].as_array().unwrap() {
        let dir = tempfile::tempdir().unwrap();
        let model = case["model"].as_str().unwrap();
        let (counts, sizes) = (case["counts"].as_array().unwrap(), case["sizes"].as_array().unwrap());
        let mut text = String::from("id,count,size\n");
        for (i, (count, size)) in counts.iter().zip(sizes).enumerate() {
            text.push_str(&format!("g{i},{count},{size}\n"));
        }
        write(dir.path(), "groups.csv", &text);
        let prior: Vec<f64> = case["prior"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
        let prior_file = saved_prior(dir.path(), model, &prior);
        let (event, threshold, bound) = (
            format!("--{}", case["event"].as_str().unwrap()),
            case["threshold"].as_f64().unwrap().to_string(),
            case["bound"].as_f64().unwrap().to_string(),
        );
        let mut args = vec!["score", "--prior", &prior_file, "--input", "groups.csv", "--group", "id"];
        args.extend(column_args(model));
        args.extend([event.as_str(), &threshold, "--flag-fdr", &bound]);
        args.extend(["--output", "scored.csv", "--summary", "scored.json", "--quiet"]);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        let table = Csv::read(&dir.path().join("scored.csv"));
        let expected_flags: Vec<String> =
            case["flagged"].as_array().unwrap().iter().map(|f| f.as_bool().unwrap().to_string()).collect();
        assert_eq!(table.column("flagged"), expected_flags, "{}", case["name"]);
        for (got, want) in table.floats("flag_fdr").iter().zip(case["flag_fdr"].as_array().unwrap()) {
            let want = want.as_f64().unwrap();
            assert!((got - want).abs() <= 1e-12, "{}: flag_fdr {got} vs {want}", case["name"]);
        }
        let report = &summary(&dir.path().join("scored.json"))["flags"];
        let flagged = expected_flags.iter().filter(|f| *f == "true").count() as u64;
        assert_eq!(report["groups_flagged"].as_u64(), Some(flagged), "{}", case["name"]);
        assert!(flagged > 0, "{}: the case flags something", case["name"]);
        // The expected false flags are the flagged groups' probabilities of
        // no event: their mean is at most Q.
        let expected_false = report["expected_false_flags"].as_f64().unwrap();
        assert!(expected_false / flagged as f64 <= case["bound"].as_f64().unwrap());
    }
}

#[test]
fn a_flag_needs_one_event_and_a_bound_strictly_between_0_and_1_and_top_needs_a_place() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "groups.csv", "id,count,size\na,1,4\nb,3,9\nc,0,2\nd,7,10\n");
    let base = ["fit", "--model", "beta-binomial", "--input", "groups.csv", "--group", "id"];
    let refusals: [(&[&str], &str); 6] = [
        (&["--top", "0"], "--top must be at least 1"),
        (&["--top", "3", "--top-draws", "0"], "--top-draws must be at least 1"),
        (&["--flag-fdr", "0.1"], "--flag-fdr needs the event to flag"),
        (&["--flag-fdr", "0.1", "--above", "0.5", "--below", "0.2"], "not both"),
        (&["--flag-fdr", "0", "--above", "0.5"], "strictly between 0 and 1"),
        (&["--flag-fdr", "1.5", "--above", "0.5"], "strictly between 0 and 1"),
    ];
    for (extra, message) in refusals {
        let mut args = base.to_vec();
        args.extend(column_args("beta-binomial"));
        args.extend(["--output", "out.csv"]);
        args.extend(extra);
        crate::util::assert_refused(dir.path(), &args, message, "out.csv");
    }
}

#[test]
fn prob_top_by_draws_is_within_0_005_of_the_exact_integral_and_the_same_bits_on_any_threads() {
    // Source: tests/fixtures/top.json, written by scripts/make_top_fixtures.py:
    // P(among the K highest) by scipy.integrate.quad over scipy.stats.beta
    // densities and the exact Poisson-binomial count of the others.
    let reference = json_fixture("top.json");
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::from("id,count,size\n");
    for (i, group) in reference["groups"].as_array().unwrap().iter().enumerate() {
        text.push_str(&format!("g{i},{},{}\n", group[0], group[1]));
    }
    write(dir.path(), "groups.csv", &text);
    let prior: Vec<f64> =
        reference["prior"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let prior_file = saved_prior(dir.path(), "beta-binomial", &prior);
    let k = reference["k"].to_string();
    let run = |threads: &str, output: &str| {
        let mut args =
            vec!["--threads", threads, "--quiet", "score", "--prior", &prior_file, "--input", "groups.csv"];
        args.extend(["--group", "id"]);
        args.extend(column_args("beta-binomial"));
        args.extend(["--top", &k, "--top-method", "draws", "--output", output, "--summary", "top.json"]);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        Csv::read(&dir.path().join(output)).floats("prob_top")
    };
    let (two, one) = (run("2", "two.csv"), run("1", "one.csv"));
    assert_eq!(two, one, "the same bits on one thread and two");
    for (got, want) in paired(&two, reference["prob_top"].as_array().unwrap(), "prob_top") {
        let want = want.as_f64().unwrap();
        assert!((got - want).abs() < 0.005, "prob_top {got} vs exact {want}");
    }
    let report = &summary(&dir.path().join("top.json"))["top"];
    assert_eq!(report["method"], "draws");
    assert_eq!(report["seed"], 20_261_202, "the default seed is recorded");
    assert_eq!(report["draws"], 100_000, "a small table gets the most draws");
}

#[test]
fn prob_top_by_threshold_expects_k_groups_and_reverses_with_lowest_first() {
    let dir = tempfile::tempdir().unwrap();
    let demo = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join("marketplace.csv");
    for (extra, best) in [(None, "highest-first"), (Some("--rank-lowest-first"), "lowest-first")] {
        let mut args = vec!["--quiet", "fit", "--model", "beta-binomial", "--input", demo.to_str().unwrap()];
        args.extend(["--group", "seller_id", "--successes", "positive_ratings", "--trials", "total_ratings"]);
        args.extend(["--top", "50", "--top-method", "threshold", "--output", "t.csv", "--summary", "t.json"]);
        args.extend(extra);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        let top = Csv::read(&dir.path().join("t.csv")).floats("prob_top");
        let expected: f64 = top.iter().sum();
        assert!((expected - 50.0).abs() < 1e-6, "{best}: {expected}");
        let report = summary(&dir.path().join("t.json"));
        assert_eq!(report["rank_order"], best, "which rates prob_top counts as best");
        assert!(report["top"]["threshold"].as_f64().unwrap() > 0.0);
    }
}

#[test]
fn a_duckdb_join_of_the_pair_output_gives_the_row_output() {
    // Source: tests/fixtures/pair_join, written by scripts/make_pair_join_fixtures.py:
    // ratepool's pair output and DuckDB's join of it back to the rows on
    // (kind, successes, trials).
    let dir = tempfile::tempdir().unwrap();
    let input = crate::util::fixture("rows/returns_summed.csv");
    let mut args = vec!["--quiet", "fit", "--model", "beta-binomial", "--input", input.to_str().unwrap()];
    args.extend(["--group", "store", "--successes", "successes", "--trials", "trials", "--by", "kind"]);
    args.extend(["--above", "0.1", "--flag-fdr", "0.1", "--ranks"]);
    args.extend(["--output", "rows.csv", "--pair-output", "pairs.parquet"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let committed = std::fs::read(crate::util::fixture("pair_join/pairs.parquet")).unwrap();
    assert_eq!(
        std::fs::read(dir.path().join("pairs.parquet")).unwrap(),
        committed,
        "the pair output DuckDB joined"
    );
    let (ours, joined) =
        (Csv::read(&dir.path().join("rows.csv")), Csv::read(&crate::util::fixture("pair_join/joined.csv")));
    assert_eq!(ours.header, joined.header);
    assert_eq!(ours.rows.len(), joined.rows.len());
    for (a, b) in ours.rows.iter().zip(&joined.rows) {
        for ((x, y), name) in a.iter().zip(b).zip(&ours.header) {
            let same = x == y || matches!((x.parse::<f64>(), y.parse::<f64>()), (Ok(u), Ok(v)) if u == v);
            assert!(same, "{name}: ours {x}, DuckDB's join {y}");
        }
    }
}

/// The largest difference over all groups between `exact` and the prob_top of `ratepool
/// score` of `input` (the demo sellers' columns) under `prior`, K = `k`, by `method` with
/// 2,000 draws.
fn largest_top_difference(prior: &str, input: &Path, k: &str, method: &str, exact: &[f64]) -> f64 {
    let dir = tempfile::tempdir().unwrap();
    let prior = crate::util::fixture(prior);
    let mut args =
        vec!["--quiet", "score", "--prior", prior.to_str().unwrap(), "--input", input.to_str().unwrap()];
    args.extend(["--group", "seller_id", "--successes", "positive_ratings", "--trials", "total_ratings"]);
    args.extend(["--top", k, "--top-method", method, "--top-draws", "2000", "--output", "top.csv"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let got = Csv::read(&dir.path().join("top.csv")).floats("prob_top");
    let worst = paired(&got, exact, method).map(|(g, e)| (g - e).abs()).fold(0.0, f64::max);
    println!(
        "prob_top by {method} over {} sellers, K = {k}: largest difference from the exact {worst:.5}",
        exact.len()
    );
    worst
}

#[test]
fn prob_top_by_both_methods_matches_the_exact_integral_over_2000_and_20000_sellers() {
    // Source: tests/fixtures/top_exact (scripts/make_top_reference.py): the exact P(among the K
    // highest) by scipy's beta posteriors, the Poisson-binomial recursion over the other sellers
    // and the trapezoid rule on a fine logit grid (the values sum to K within 3e-12), for the
    // first 2,000 demo sellers with K = 5 (prior.json) and all 20,000 with K = 20 (prior-all.json).
    let reference = json_fixture("top_exact/exact.json");
    let values = |v: &serde_json::Value| -> Vec<f64> {
        v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
    };
    let (first, all) = (values(&reference["prob_top"]), values(&reference["all_sellers"]["prob_top"]));
    assert_eq!((first.len(), all.len()), (2000, 20_000));
    let sellers = crate::util::fixture("top_exact/sellers.csv");
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data/marketplace.csv");
    // Bounds at twice a measured figure. The README gives 0.00040 and 0.00066 (2,000 sellers) and
    // 0.00059 and 0.0015 (20,000; the threshold's regime of many groups); the 2,000-seller bounds
    // are twice the slightly smaller figures measured against 100,000 draws before (0.00039,
    // 0.00065), kept so that no bound is loosened.
    let cases = [
        ("top_exact/prior.json", &sellers, "5", "draws", 0.00039, &first),
        ("top_exact/prior.json", &sellers, "5", "threshold", 0.00065, &first),
        ("top_exact/prior-all.json", &demo, "20", "threshold", 0.0015, &all),
        ("top_exact/prior-all.json", &demo, "20", "draws", 0.00059, &all),
    ];
    for (prior, input, k, method, figure, exact) in cases {
        let worst = largest_top_difference(prior, input, k, method, exact);
        assert!(worst <= 2.0 * figure, "{method}, K = {k}: measured {figure}; largest difference {worst}");
    }
}
