//! Rows that are not groups: trials (`--outcome`) and parts of groups
//! (`--aggregate`) give the output of the table summed per group, byte for
//! byte. The summed tables were made by DuckDB (scripts/make_row_fixtures.py),
//! not by ratepool.

use crate::util::{fixture, ratepool, stderr, summary, write, Csv};
use std::path::Path;

fn run_ok(dir: &Path, args: &[&str]) {
    let out = ratepool(dir, args);
    assert!(out.status.success(), "{args:?}: {}", stderr(&out));
}

fn rows(name: &str) -> String {
    fixture(&format!("rows/{name}")).to_str().unwrap().to_string()
}

#[test]
fn trials_give_the_output_of_their_sums_per_group_from_csv_and_parquet() {
    // Source: tests/fixtures/rows/returns_summed.csv, DuckDB's GROUP BY of the
    // same orders (sum of the outcome, count of rows), in first-appearance order.
    let dir = tempfile::tempdir().unwrap();
    let common = ["--model", "beta-binomial", "--group", "store", "--by", "kind", "--above", "0.1"];
    let summed = rows("returns_summed.csv");
    let mut args =
        vec!["--quiet", "fit", "--input", &summed, "--successes", "successes", "--trials", "trials"];
    args.extend(common);
    args.extend(["--output", "summed.csv", "--summary", "summed.json"]);
    run_ok(dir.path(), &args);
    for (input, batch) in [("returns.csv", "65536"), ("returns.parquet", "1000"), ("returns.csv", "7")] {
        let input = rows(input);
        let mut args =
            vec!["--quiet", "fit", "--input", &input, "--outcome", "returned", "--batch-rows", batch];
        args.extend(common);
        args.extend(["--output", "trials.csv", "--summary", "trials.json"]);
        run_ok(dir.path(), &args);
        let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
        assert_eq!(read("trials.csv"), read("summed.csv"), "{input}");
        let (mut trials, summed) =
            (summary(&dir.path().join("trials.json")), summary(&dir.path().join("summed.json")));
        assert_eq!(trials["rows_read"], 12_000);
        trials["rows_read"] = summed["rows_read"].clone();
        assert_eq!(trials, summed, "{input}");
    }
}

#[test]
fn shuffled_rating_rows_give_the_output_of_duckdbs_sums_whatever_the_batches() {
    // Source: tests/fixtures/rows/ratings_summed.csv, DuckDB's GROUP BY of the
    // 48,784 shuffled rating rows of 3,000 sellers (every seventh id longer than
    // a group-table slot holds), in first-appearance order
    // (scripts/make_row_fixtures.py).
    let dir = tempfile::tempdir().unwrap();
    let summed = rows("ratings_summed.csv");
    let common = ["--model", "beta-binomial", "--group", "seller_id", "--ranks", "--above", "0.8"];
    let mut args =
        vec!["--quiet", "fit", "--input", &summed, "--successes", "successes", "--trials", "trials"];
    args.extend(common);
    args.extend(["--output", "summed.csv", "--summary", "summed.json"]);
    run_ok(dir.path(), &args);
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("summed.csv").lines().count(), 3_001);
    for (input, batch) in [("ratings.parquet", "65536"), ("ratings.parquet", "997"), ("ratings.csv", "4096")]
    {
        let input = rows(input);
        let mut args =
            vec!["--quiet", "fit", "--input", &input, "--outcome", "positive", "--batch-rows", batch];
        args.extend(common);
        args.extend(["--output", "rows.csv", "--summary", "rows.json"]);
        run_ok(dir.path(), &args);
        assert_eq!(read("rows.csv"), read("summed.csv"), "{input}, batches of {batch}");
        let (mut from_rows, summed) =
            (summary(&dir.path().join("rows.json")), summary(&dir.path().join("summed.json")));
        assert_eq!(from_rows["rows_read"], 48_784);
        from_rows["rows_read"] = summed["rows_read"].clone();
        assert_eq!(from_rows, summed, "{input}");
    }
}

#[test]
fn parts_of_groups_give_the_output_of_their_sums_for_both_models() {
    // Source: tests/fixtures/rows/store_days_summed.csv, DuckDB's sums per store.
    let dir = tempfile::tempdir().unwrap();
    let (days, summed) = (rows("store_days.csv"), rows("store_days_summed.csv"));
    let models: [&[&str]; 2] = [
        &["--model", "beta-binomial", "--successes", "returns", "--trials", "orders"],
        &["--model", "gamma-poisson", "--events", "returns", "--exposure", "hours_open"],
    ];
    for model in models {
        let mut base = vec!["--quiet", "fit", "--group", "store", "--ranks"];
        base.extend(model);
        let mut from_sums = base.clone();
        from_sums.extend(["--input", &summed, "--output", "sums.csv"]);
        run_ok(dir.path(), &from_sums);
        let mut from_days = base.clone();
        from_days.extend(["--input", &days, "--aggregate", "--output", "days.csv"]);
        run_ok(dir.path(), &from_days);
        let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
        assert_eq!(read("days.csv"), read("sums.csv"), "{model:?}");
    }
}

#[test]
fn bad_outcomes_name_their_row_and_column_or_go_to_the_rejects() {
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::from("store,returned\na,1\na,0\nb,yes\nb,1\n,1\nc,2\n");
    for i in 0..400 {
        text.push_str(&format!("s{},{}\n", i % 40, u8::from(i % (2 + i % 40 / 10) == 0)));
    }
    write(dir.path(), "t.csv", &text);
    let base =
        ["fit", "--model", "beta-binomial", "--input", "t.csv", "--group", "store", "--outcome", "returned"];
    let mut args = base.to_vec();
    args.extend(["--output", "out.csv"]);
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(2));
    let message = stderr(&out);
    assert!(
        message.contains("row 3") && message.contains("returned") && message.contains("'yes'"),
        "{message}"
    );
    assert!(!dir.path().join("out.csv").exists());
    let mut args = base.to_vec();
    args.extend(["--output", "out.csv", "--on-invalid", "skip", "--rejects", "rejects.csv"]);
    run_ok(dir.path(), &args);
    let out = Csv::read(&dir.path().join("out.csv"));
    let b = out.rows.iter().find(|r| r[0] == "b").expect("group b");
    assert_eq!((b[1].as_str(), b[2].as_str()), ("1", "1"), "b: its one valid trial");
    let rejects = Csv::read(&dir.path().join("rejects.csv"));
    assert_eq!(rejects.header, ["row", "store", "returned", "column", "reason"]);
    assert_eq!(rejects.column("row"), ["3", "5", "6"]);
}

#[test]
fn outcome_is_for_proportions_and_not_for_pair_tables() {
    let dir = tempfile::tempdir().unwrap();
    write(dir.path(), "t.csv", "store,returned\na,1\n");
    let refusals: [(&[&str], &str); 3] = [
        (
            &["--model", "gamma-poisson", "--group", "store", "--outcome", "returned", "--output", "o.csv"],
            "beta-binomial",
        ),
        (
            &[
                "--model",
                "beta-binomial",
                "--pair-counts",
                "n",
                "--outcome",
                "returned",
                "--summary",
                "s.json",
            ],
            "does not apply to a pair table",
        ),
        (
            &[
                "--model",
                "beta-binomial",
                "--group",
                "store",
                "--outcome",
                "returned",
                "--trials",
                "returned",
                "--output",
                "o.csv",
            ],
            "also named as an output count column",
        ),
    ];
    for (extra, message) in refusals {
        let mut args = vec!["fit", "--input", "t.csv"];
        args.extend(extra);
        let out = ratepool(dir.path(), &args);
        assert_eq!(out.status.code(), Some(2), "{extra:?}");
        assert!(stderr(&out).contains(message), "{extra:?}: {}", stderr(&out));
    }
}

#[test]
fn a_sum_beyond_2_to_the_53_names_the_row_column_and_group() {
    let dir = tempfile::tempdir().unwrap();
    let half = 1u64 << 52;
    let text = format!("store,k,n\na,1,{half}\nb,0,3\na,1,{half}\na,0,1\n");
    write(dir.path(), "days.csv", &text);
    let args = ["fit", "--model", "beta-binomial", "--input", "days.csv", "--group", "store", "--aggregate"];
    let mut args = args.to_vec();
    args.extend(["--successes", "k", "--trials", "n", "--output", "out.csv"]);
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(2));
    let message = stderr(&out);
    assert!(message.contains("row 4") && (message.contains("'n'") || message.contains("n:")), "{message}");
    assert!(message.contains("group 'a'") && message.contains("2^53"), "{message}");
    assert!(!dir.path().join("out.csv").exists());
}

#[test]
fn the_district_quarters_summed_give_the_districts_prior_as_the_readme_prints_it() {
    // The README: the demo districts split over four quarters, summed with --aggregate, "give the
    // prior of the districts themselves (shape 6.0079340817145, to the last printed digit)".
    let dir = tempfile::tempdir().unwrap();
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let mut shapes = Vec::new();
    for (file, extra) in [("district_quarters.csv", Some("--aggregate")), ("districts.csv", None)] {
        let input = demo.join(file);
        let mut args = vec!["--quiet", "fit", "--input", input.to_str().unwrap(), "--model", "gamma-poisson"];
        args.extend(["--group", "district_id", "--events", "observed_cases", "--exposure", "expected_cases"]);
        args.extend(["--output", "out.csv", "--summary", "s.json"]);
        args.extend(extra);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        shapes.push(summary(&dir.path().join("s.json"))["prior"]["shape"].as_f64().unwrap());
    }
    for shape in &shapes {
        assert_eq!(format!("{shape:.13}"), "6.0079340817145", "{shapes:?}");
    }
    assert!((shapes[0] - shapes[1]).abs() <= 4.0 * f64::EPSILON * shapes[1], "{shapes:?}");
}
