//! The command line's contract: exit codes, messages that name the row and
//! column, no output on failure, rejects files, prior reuse, determinism.

use crate::util::{fixture, ratepool, stderr, summary, write, Csv};
use std::path::Path;

const GOOD: &str = "id,k,n\na,1,4\nb,3,9\nc,0,2\nd,7,10\ne,2,2\nf,5,12\ng,0,0\nh,9,30\n";

fn fit_args<'a>(input: &'a str, output: &'a str) -> Vec<&'a str> {
    vec![
        "fit",
        "--input",
        input,
        "--model",
        "beta-binomial",
        "--group",
        "id",
        "--successes",
        "k",
        "--trials",
        "n",
        "--output",
        output,
        "--summary",
        "s.json",
    ]
}

/// Runs a fit on `csv` that must fail with `code`, mention every `needle`,
/// and leave no output, summary or temporary file behind.
fn assert_refused(csv: &str, code: i32, needles: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", csv);
    let out = ratepool(dir.path(), &fit_args(&input, "out.csv"));
    let message = stderr(&out);
    assert_eq!(out.status.code(), Some(code), "{message}");
    for needle in needles {
        assert!(message.contains(needle), "expected '{needle}' in: {message}");
    }
    assert_only_input(dir.path());
}

fn assert_only_input(dir: &Path) {
    let left: Vec<String> =
        std::fs::read_dir(dir).unwrap().map(|e| e.unwrap().file_name().into_string().unwrap()).collect();
    assert_eq!(left, vec!["in.csv".to_string()], "files left behind");
}

#[test]
fn a_missing_column_lists_the_available_ones() {
    assert_refused("id,k,total\na,1,4\n", 2, &["no column 'n'", "available columns: id, k, total"]);
}

#[test]
fn successes_above_trials_name_row_and_column() {
    assert_refused("id,k,n\na,1,4\nb,5,3\n", 2, &["row 2", "column 'k'", "exceed"]);
}

#[test]
fn negative_fractional_textual_and_non_finite_counts_are_refused() {
    assert_refused("id,k,n\na,1,4\nb,-1,3\n", 2, &["row 2", "column 'k'", "negative"]);
    assert_refused("id,k,n\na,1,4.5\n", 2, &["row 1", "column 'n'", "whole number"]);
    assert_refused("id,k,n\na,1,4\nb,x,3\nc,1,1\n", 2, &["row 2", "column 'k'", "'x' is not a number"]);
    assert_refused("id,k,n\na,1,4\nb,1,NaN\n", 2, &["row 2", "column 'n'", "finite"]);
    assert_refused("id,k,n\na,1,inf\n", 2, &["row 1", "column 'n'", "finite"]);
    assert_refused("id,k,n\na,1,9007199254740993\n", 2, &["row 1", "column 'n'", "2^53"]);
}

#[test]
fn null_and_duplicate_group_ids_are_refused() {
    assert_refused("id,k,n\na,1,4\n,1,3\n", 2, &["row 2", "column 'id'", "missing"]);
    assert_refused(
        "id,k,n\na,1,4\nb,1,3\na,2,5\n",
        2,
        &["row 3", "column 'id'", "duplicate", "first at row 1"],
    );
}

#[test]
fn empty_and_header_only_inputs_are_refused() {
    assert_refused("", 2, &["in.csv"]);
    assert_refused("id,k,n\n", 2, &["no data rows"]);
}

#[test]
fn exposure_must_be_positive_when_there_are_events() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", "id,y,e\na,1,2.0\nb,3,0\n");
    let out = ratepool(
        dir.path(),
        &[
            "fit",
            "--input",
            &input,
            "--model",
            "gamma-poisson",
            "--group",
            "id",
            "--events",
            "y",
            "--exposure",
            "e",
            "--output",
            "out.csv",
        ],
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("row 2, column 'e'"), "{}", stderr(&out));
    assert_only_input(dir.path());
}

#[test]
fn a_level_outside_zero_one_and_an_unknown_model_are_usage_errors() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", GOOD);
    let mut args = fit_args(&input, "out.csv");
    args.extend(["--level", "1.5"]);
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("--level"));
    let out = ratepool(
        dir.path(),
        &["fit", "--input", &input, "--model", "beta-poisson", "--group", "id", "--output", "o.csv"],
    );
    assert_eq!(out.status.code(), Some(2));
    assert_only_input(dir.path());
}

#[test]
fn only_the_mean_is_identifiable_when_every_group_has_one_trial() {
    assert_refused("id,k,n\na,1,1\nb,0,1\nc,1,1\nd,0,0\n", 3, &["only the prior mean", "identifiable"]);
}

#[test]
fn skip_mode_writes_exactly_the_bad_rows_and_scores_the_rest() {
    let dir = tempfile::tempdir().unwrap();
    let input =
        write(dir.path(), "in.csv", "id,k,n\na,1,4\nb,5,3\nc,0,2\n,1,1\nd,7,10\ne,x,2\nf,5,12\ng,1,3\n");
    let mut args = fit_args(&input, "out.csv");
    args.extend(["--on-invalid", "skip", "--rejects", "bad.csv"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let rejects = Csv::read(&dir.path().join("bad.csv"));
    assert_eq!(rejects.column("row"), vec!["2", "4", "6"]);
    assert_eq!(rejects.column("column"), vec!["k", "id", "k"]);
    let scored = Csv::read(&dir.path().join("out.csv"));
    assert_eq!(scored.column("id"), vec!["a", "c", "d", "f", "g"]);
    let s = summary(&dir.path().join("s.json"));
    assert_eq!(
        (s["rows_read"].as_u64(), s["rows_rejected"].as_u64(), s["groups"].as_u64()),
        (Some(8), Some(3), Some(5))
    );
}

#[test]
fn output_keeps_input_order_and_the_documented_columns() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", GOOD);
    let out = ratepool(dir.path(), &fit_args(&input, "out.csv"));
    assert!(out.status.success(), "{}", stderr(&out));
    let table = Csv::read(&dir.path().join("out.csv"));
    assert_eq!(
        table.header,
        [
            "id",
            "k",
            "n",
            "raw_proportion",
            "posterior_mean",
            "posterior_sd",
            "interval_lo",
            "interval_hi",
            "pool_weight",
            "posterior_param_alpha",
            "posterior_param_beta"
        ]
    );
    assert_eq!(table.column("id"), vec!["a", "b", "c", "d", "e", "f", "g", "h"]);
    // Group g has no trials: no raw rate, and it keeps the prior exactly.
    let g = 6;
    assert_eq!(table.column("raw_proportion")[g], "");
    assert_eq!(table.floats("pool_weight")[g], 1.0);
    let s = summary(&dir.path().join("s.json"));
    let mean = s["prior"]["mean"].as_f64().unwrap();
    assert!((table.floats("posterior_mean")[g] - mean).abs() < 1e-12);
    // The terminal gets the short summary.
    assert!(String::from_utf8_lossy(&out.stdout).contains("pool weight"));
}

/// Group and count columns of the beta-binomial fixtures.
const FIXTURE_COLUMNS: [&str; 6] = ["--group", "unit", "--successes", "hits", "--trials", "tries"];

/// Runs ratepool with `head`, then the fixture's column options, then `tail`; it must succeed.
fn run_with_fixture_columns(dir: &Path, head: &[&str], tail: &[&str]) {
    let args: Vec<&str> = head.iter().chain(&FIXTURE_COLUMNS).chain(tail).copied().collect();
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{}", stderr(&out));
}

#[test]
fn parquet_output_and_input_round_trip_through_score_with_the_saved_prior() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("beta_binomial_groups.csv");
    let input = input.to_str().unwrap();
    let fit = ["--quiet", "fit", "--input", input, "--model", "beta-binomial"];
    run_with_fixture_columns(dir.path(), &fit, &["--output", "fitted.parquet", "--summary", "prior.json"]);
    // Score the Parquet output itself (it carries the group and count columns) with the saved prior.
    run_with_fixture_columns(
        dir.path(),
        &["score", "--input", "fitted.parquet", "--prior", "prior.json"],
        &["--output", "rescored.csv", "--summary", "again.json"],
    );
    run_with_fixture_columns(dir.path(), &fit, &["--output", "fitted.csv"]);
    let (first, second) =
        (Csv::read(&dir.path().join("fitted.csv")), Csv::read(&dir.path().join("rescored.csv")));
    assert_eq!(first.rows, second.rows, "score with the saved prior reproduces the fit's output");
    assert_eq!(
        summary(&dir.path().join("again.json"))["prior"],
        summary(&dir.path().join("prior.json"))["prior"]
    );
}

#[test]
fn a_prior_from_the_other_model_or_a_corrupt_prior_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", GOOD);
    assert!(ratepool(dir.path(), &fit_args(&input, "out.csv")).status.success());
    let score = |prior: &str| {
        ratepool(
            dir.path(),
            &[
                "score",
                "--input",
                &input,
                "--prior",
                prior,
                "--model",
                "gamma-poisson",
                "--group",
                "id",
                "--events",
                "k",
                "--exposure",
                "n",
                "--output",
                "scored.csv",
            ],
        )
    };
    let out = score("s.json");
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("beta-binomial"), "{}", stderr(&out));
    write(dir.path(), "broken.json", "{\"model\": \"gamma-poisson\", \"hyperprior\": ");
    let out = score("broken.json");
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("not a ratepool summary"), "{}", stderr(&out));
    assert!(!dir.path().join("scored.csv").exists());
}

#[test]
fn an_unwritable_output_folder_is_exit_one_with_nothing_written() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", GOOD);
    let out = ratepool(dir.path(), &fit_args(&input, "missing/out.csv"));
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(stderr(&out).contains("missing"));
    assert!(!dir.path().join("s.json").exists(), "the summary must not be written when the table failed");
}

#[test]
fn output_is_byte_identical_for_one_and_two_threads() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("gamma_poisson_areas.csv");
    let run = |threads: &str, out: &str| {
        ratepool(
            dir.path(),
            &[
                "--threads",
                threads,
                "--quiet",
                "fit",
                "--input",
                input.to_str().unwrap(),
                "--model",
                "gamma-poisson",
                "--group",
                "area",
                "--events",
                "cases",
                "--exposure",
                "expected",
                "--output",
                out,
            ],
        )
    };
    assert!(run("1", "one.parquet").status.success());
    assert!(run("2", "two.parquet").status.success());
    assert_eq!(
        std::fs::read(dir.path().join("one.parquet")).unwrap(),
        std::fs::read(dir.path().join("two.parquet")).unwrap()
    );
}

#[test]
fn a_corrupt_parquet_file_is_bad_input_with_nothing_written() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("in.parquet"), b"PAR1 this is not really parquet").unwrap();
    let out = ratepool(dir.path(), &fit_args("in.parquet", "out.csv"));
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(stderr(&out).contains("in.parquet"), "{}", stderr(&out));
    assert!(!dir.path().join("out.csv").exists() && !dir.path().join("s.json").exists());
}

#[test]
fn a_complete_pooling_prior_scores_every_group_at_the_pooled_rate() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("binomial_groups.csv");
    let input = input.to_str().unwrap();
    run_with_fixture_columns(
        dir.path(),
        &["--quiet", "fit", "--input", input, "--model", "beta-binomial"],
        &["--output", "fit.csv", "--summary", "p.json"],
    );
    run_with_fixture_columns(
        dir.path(),
        &["--quiet", "score", "--input", input, "--prior", "p.json"],
        &["--output", "scored.csv"],
    );
    let mean = summary(&dir.path().join("p.json"))["prior"]["mean"].as_f64().unwrap();
    let scored = Csv::read(&dir.path().join("scored.csv"));
    assert!(scored.floats("posterior_mean").iter().all(|&m| m == mean));
    assert_eq!(scored.rows, Csv::read(&dir.path().join("fit.csv")).rows);
}

#[test]
fn exceedance_columns_are_complementary_and_a_point_mass_under_complete_pooling() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", GOOD);
    let mut args = fit_args(&input, "out.csv");
    args.extend(["--above", "0.3", "--below", "0.3"]);
    let out = ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", stderr(&out));
    let table = Csv::read(&dir.path().join("out.csv"));
    assert_eq!(&table.header[table.header.len() - 2..], ["prob_above", "prob_below"]);
    for (above, below) in table.floats("prob_above").iter().zip(table.floats("prob_below")) {
        assert!((above + below - 1.0).abs() < 1e-12 && (0.0..=1.0).contains(above), "{above} + {below}");
    }
    // No overdispersion: the posterior is a point mass at the pooled rate.
    let fixture_input = fixture("binomial_groups.csv");
    let columns = ["--group", "unit", "--successes", "hits", "--trials", "tries", "--output", "pooled.csv"];
    let mut pooled =
        vec!["--quiet", "fit", "--model", "beta-binomial", "--input", fixture_input.to_str().unwrap()];
    pooled.extend(columns);
    pooled.extend(["--above", "0.05", "--summary", "p.json"]);
    let out = ratepool(dir.path(), &pooled);
    assert!(out.status.success(), "{}", stderr(&out));
    let mean = summary(&dir.path().join("p.json"))["prior"]["mean"].as_f64().unwrap();
    let expected = if mean > 0.05 { 1.0 } else { 0.0 };
    assert!(Csv::read(&dir.path().join("pooled.csv")).floats("prob_above").iter().all(|&p| p == expected));
}

#[test]
fn an_exceedance_threshold_outside_the_models_range_is_a_usage_error() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(dir.path(), "in.csv", GOOD);
    for (flag, value) in [("--above", "1.5"), ("--below", "-0.1"), ("--above", "NaN")] {
        let mut args = fit_args(&input, "out.csv");
        args.extend([flag, value]);
        let out = ratepool(dir.path(), &args);
        assert_eq!(out.status.code(), Some(2), "{flag} {value}");
        assert!(stderr(&out).contains(flag.trim_start_matches('-')), "{}", stderr(&out));
        assert_only_input(dir.path());
    }
}

/// Ranks by their definition, computed here row by row from the output:
/// 1 + the number of groups with a strictly better value.
#[test]
fn ranks_count_the_groups_strictly_ahead_in_either_direction() {
    let dir = tempfile::tempdir().unwrap();
    let input = fixture("beta_binomial_groups.csv");
    let header = std::fs::read_to_string(&input).unwrap().lines().next().unwrap().to_string();
    let columns: Vec<&str> = header.split(',').collect();
    for (flag, lowest_first) in [("--ranks", false), ("--rank-lowest-first", true)] {
        let args = [
            "--quiet",
            "fit",
            "--model",
            "beta-binomial",
            "--input",
            input.to_str().unwrap(),
            "--group",
            columns[0],
            "--successes",
            columns[1],
            "--trials",
            columns[2],
            "--output",
            "ranked.csv",
            flag,
        ];
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
        let table = Csv::read(&dir.path().join("ranked.csv"));
        let bound = if lowest_first { "interval_hi" } else { "interval_lo" };
        for (values, ranks) in [("posterior_mean", "rank_mean"), (bound, "rank_conservative")] {
            let values = table.floats(values);
            let ranks = table.floats(ranks);
            for (value, rank) in values.iter().zip(&ranks) {
                let ahead =
                    values.iter().filter(|v| if lowest_first { *v < value } else { *v > value }).count();
                assert_eq!(*rank, (ahead + 1) as f64, "{flag}: {value}");
            }
            assert!(ranks.contains(&1.0));
        }
    }
}

/// The worked examples at the end of a subcommand's help, each as its arguments.
fn help_examples(subcommand: &str) -> Vec<Vec<String>> {
    let out = ratepool(Path::new("."), &[subcommand, "--help"]);
    assert!(out.status.success());
    let help = String::from_utf8_lossy(&out.stdout).into_owned();
    let examples = &help[help.find("Example").unwrap_or_else(|| panic!("{subcommand}: no example"))..];
    let joined = examples.lines().skip(1).collect::<Vec<_>>().join("\n").replace("\\\n", " ");
    joined
        .lines()
        .map(|line| line.split_whitespace().map(str::to_string).collect::<Vec<_>>())
        .filter(|words| words.first().is_some_and(|w| w == "ratepool"))
        .map(|words| words[1..].to_vec())
        .collect()
}

#[test]
fn every_worked_example_in_the_help_runs_on_the_demo_data() {
    // Run in a scratch folder, with the demo files where the examples name them.
    let dir = tempfile::tempdir().unwrap();
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    std::os::unix::fs::symlink(root.join("demo-data"), dir.path().join("demo-data")).unwrap();
    std::os::unix::fs::symlink(root.join("tests"), dir.path().join("tests")).unwrap();
    let mut ran = 0;
    // The neighbour tables first: a fit example reads one.
    for subcommand in ["neighbours", "fit", "score", "report", "check-config"] {
        for args in help_examples(subcommand) {
            let args: Vec<&str> = args.iter().map(String::as_str).collect();
            let out = ratepool(dir.path(), &[&["--quiet"], &args[..]].concat());
            assert!(out.status.success(), "{args:?}: {}", stderr(&out));
            ran += 1;
        }
    }
    assert_eq!(ran, 10);
    let written = [
        "county_neighbours.csv",
        "district_neighbours.csv",
        "local.html",
        "sellers.parquet",
        "districts.html",
        "profiles.parquet",
        "clinics.csv",
        "scored.parquet",
        "plots/funnel.svg",
    ];
    for written in written {
        assert!(dir.path().join(written).exists(), "{written}");
    }
}

#[test]
fn completions_and_the_manual_page_come_from_the_definition() {
    let out = ratepool(Path::new("."), &["completions", "bash"]);
    assert!(out.status.success());
    let script = String::from_utf8_lossy(&out.stdout);
    for word in ["check-config", "--flag-fdr", "--variance-method", "--log-format"] {
        assert!(script.contains(word), "{word}");
    }
    let out = ratepool(Path::new("."), &["manpage"]);
    assert!(out.status.success());
    let page = String::from_utf8_lossy(&out.stdout);
    assert!(page.contains(".TH ratepool 1") && page.contains("fit"), "{}", &page[..200]);
    // Options come in groups.
    let out = ratepool(Path::new("."), &["fit", "--help"]);
    let help = String::from_utf8_lossy(&out.stdout);
    let headings: Vec<usize> =
        ["Model:", "Input:", "Analysis:", "Output:", "Run:"].iter().map(|h| help.find(h).expect(h)).collect();
    assert!(headings.windows(2).all(|w| w[0] < w[1]), "{headings:?}");
}
