//! Expected counts by indirect standardisation (`--population`, `--strata`,
//! `--reference-rates`). Source: tests/fixtures/standardisation/, the
//! handbook formula (expected = sum over strata of population x reference
//! rate; internal standard: a stratum's rate is all areas' events over all
//! areas' population in it; SMR = observed / expected, common practice)
//! computed by pandas in scripts/make_standardisation_fixtures.py, not by
//! ratepool.

use crate::util::{assert_refused, fixture, paired, ratepool, relative, stderr, summary, write, Csv};
use std::path::Path;

fn standard(name: &str) -> String {
    fixture(&format!("standardisation/{name}")).to_str().unwrap().to_string()
}

fn run_ok(dir: &Path, args: &[&str]) {
    let out = ratepool(dir, args);
    assert!(out.status.success(), "{args:?}: {}", stderr(&out));
}

fn fit_args<'a>(input: &'a str, output: &'a str) -> Vec<&'a str> {
    let mut args =
        vec!["--quiet", "fit", "--model", "gamma-poisson", "--input", input, "--group", "district"];
    args.extend(["--events", "cases", "--population", "population", "--strata", "age_band"]);
    args.extend(["--output", output, "--summary", "summary.json"]);
    args
}

/// The run's districts, cases, expected counts and SMRs against pandas'.
fn assert_expected_counts(output: &Path, reference: &str) {
    let (got, want) = (Csv::read(output), Csv::read(Path::new(&standard(reference))));
    assert_eq!(got.column("district"), want.column("district"), "first-appearance order");
    assert_eq!(got.column("cases"), want.column("cases"));
    for name in ["expected", "smr"] {
        for (g, w) in paired(&got.floats(name), &want.floats(name), name) {
            assert!(relative(*g, *w) < 1e-13, "{name}: {g} against {w}");
        }
    }
}

#[test]
fn internal_standard_expected_counts_and_smrs_are_the_handbook_formulas() {
    let dir = tempfile::tempdir().unwrap();
    for input in ["area_bands.csv", "area_bands.parquet"] {
        let input = standard(input);
        let mut args = fit_args(&input, "out.csv");
        args.extend(["--report", "report.html"]);
        run_ok(dir.path(), &args);
        let page = std::fs::read_to_string(dir.path().join("report.html")).unwrap();
        assert!(page.contains("40 groups"), "the report reads the smr column");
        assert_expected_counts(&dir.path().join("out.csv"), "expected_internal.csv");
        let report = summary(&dir.path().join("summary.json"))["standardisation"].clone();
        assert_eq!(report["standard"], "internal");
        assert_eq!(report["rates"].as_array().unwrap().len(), 5);
        // Each pooled rate is its events over its population, as reported.
        for rate in report["rates"].as_array().unwrap() {
            let (events, population) =
                (rate["events"].as_f64().unwrap(), rate["population"].as_f64().unwrap());
            assert_eq!(rate["rate"].as_f64().unwrap(), events / population);
        }
    }
}

#[test]
fn external_standard_uses_the_reference_rates() {
    let dir = tempfile::tempdir().unwrap();
    let (input, rates) = (standard("area_bands.csv"), standard("national_rates.csv"));
    let mut args = fit_args(&input, "out.csv");
    args.extend(["--reference-rates", &rates]);
    run_ok(dir.path(), &args);
    assert_expected_counts(&dir.path().join("out.csv"), "expected_external.csv");
    let report = summary(&dir.path().join("summary.json"))["standardisation"].clone();
    assert_eq!(
        (report["standard"].as_str(), report["rates"][0]["events"].is_null()),
        (Some("external"), true)
    );
}

#[test]
fn the_posteriors_are_those_of_the_gamma_poisson_model_on_observed_against_expected() {
    // The same fit run on pandas' table of cases and expected counts.
    let dir = tempfile::tempdir().unwrap();
    run_ok(dir.path(), &fit_args(&standard("area_bands.csv"), "bands.csv"));
    let summed = standard("expected_internal.csv");
    let args = ["--quiet", "fit", "--model", "gamma-poisson", "--input", &summed, "--group", "district"];
    let mut args = args.to_vec();
    args.extend(["--events", "cases", "--exposure", "expected", "--output", "summed.csv"]);
    run_ok(dir.path(), &args);
    let (bands, summed) =
        (Csv::read(&dir.path().join("bands.csv")), Csv::read(&dir.path().join("summed.csv")));
    for name in ["posterior_mean", "interval_lo", "interval_hi", "pool_weight"] {
        for (b, s) in paired(&bands.floats(name), &summed.floats(name), name) {
            assert!(relative(*b, *s) < 1e-10, "{name}: {b} against {s}");
        }
    }
}

#[test]
fn bad_rows_are_named_by_row_column_and_stratum() {
    let dir = tempfile::tempdir().unwrap();
    let header = "district,age_band,cases,population\n";
    let cases: [(&str, &[&str]); 4] = [
        ("a,young,1,100\na,old,2,-5\n", &["row 2", "population", "negative"]),
        ("a,young,1,100\nb,old,3,0\n", &["row 2", "population", "3 events"]),
        ("a,young,1,100\nb,old,x,10\n", &["row 2", "cases", "whole number"]),
        ("a,young,1,100\nb,,1,10\n", &["row 2", "age_band", "missing"]),
    ];
    for (rows, words) in cases {
        let input = write(dir.path(), "bands.csv", &format!("{header}{rows}"));
        let out = ratepool(dir.path(), &fit_args(&input, "out.csv"));
        assert_eq!(out.status.code(), Some(2), "{rows}");
        for word in words {
            assert!(stderr(&out).contains(word), "{rows}: {word} in {}", stderr(&out));
        }
        assert!(!dir.path().join("out.csv").exists());
    }
    // A stratum with no events anywhere has a pooled rate of zero.
    let input = write(dir.path(), "bands.csv", &format!("{header}a,young,0,100\na,old,2,50\nb,young,0,80\n"));
    assert_refused(
        dir.path(),
        &fit_args(&input, "out.csv"),
        "age_band = 'young' has no events in any area",
        "out.csv",
    );
    // A stratum the external standard does not hold.
    let rates = write(dir.path(), "rates.csv", "age_band,rate\nyoung,0.01\n");
    let input = write(dir.path(), "bands.csv", &format!("{header}a,young,1,100\na,old,2,50\n"));
    let mut args = fit_args(&input, "out.csv");
    args.extend(["--reference-rates", &rates]);
    assert_refused(
        dir.path(),
        &args,
        "row 2, column 'age_band': the stratum age_band = 'old' has no reference rate",
        "out.csv",
    );
    // A repeated stratum in the standard (the same file, rewritten).
    write(dir.path(), "rates.csv", "age_band,rate\nyoung,0.01\nold,0.02\nyoung,0.03\n");
    assert_refused(dir.path(), &args, "repeats the stratum age_band = 'young' of row 1", "out.csv");
    // An area with nobody in any stratum has no expected count.
    let input = write(
        dir.path(),
        "bands.csv",
        &format!("{header}a,young,1,100\nb,young,0,0\nb,old,0,0\na,old,2,50\n"),
    );
    assert_refused(
        dir.path(),
        &fit_args(&input, "out.csv"),
        "area 'b' (first on this row) has an expected count of zero",
        "out.csv",
    );
}

#[test]
fn skipped_rows_go_to_the_rejects_with_their_events_and_population() {
    let dir = tempfile::tempdir().unwrap();
    let input = write(
        dir.path(),
        "bands.csv",
        "district,age_band,cases,population\na,young,1,100\na,old,2,-5\nb,young,3,90\nb,old,4,60\n",
    );
    let mut args = fit_args(&input, "out.csv");
    args.extend(["--on-invalid", "skip", "--rejects", "rejects.csv"]);
    run_ok(dir.path(), &args);
    let rejects = std::fs::read_to_string(dir.path().join("rejects.csv")).unwrap();
    assert!(
        rejects.contains("population") && rejects.contains("-5") && rejects.contains("negative"),
        "{rejects}"
    );
    assert_eq!(Csv::read(&dir.path().join("out.csv")).column("district"), ["a", "b"]);
}

#[test]
fn what_standardisation_does_not_combine_with_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let input = standard("area_bands.csv");
    let with = |extra: &[&'static str]| {
        let mut args = fit_args(&input, "out.csv");
        args.extend(extra);
        args
    };
    assert_refused(
        dir.path(),
        &with(&["--exposure", "population"]),
        "--population does not combine with --exposure",
        "out.csv",
    );
    assert_refused(
        dir.path(),
        &with(&["--by", "age_band"]),
        "also the events, population or a --by column",
        "out.csv",
    );
    let mut args = fit_args(&input, "out.csv");
    args[3] = "beta-binomial";
    assert_refused(
        dir.path(),
        &args,
        "--population makes expected counts for a model of events against exposure",
        "out.csv",
    );
    let args = [
        "fit",
        "--model",
        "gamma-poisson",
        "--input",
        &input,
        "--group",
        "district",
        "--events",
        "cases",
        "--strata",
        "age_band",
        "--output",
        "out.csv",
    ];
    assert_refused(dir.path(), &args, "give --population COLUMN", "out.csv");
}

#[test]
fn a_score_with_a_saved_prior_measures_by_the_fits_standard() {
    // Scoring only some districts: an internal standard pooled from them alone
    // would move every expected count; the saved rates keep the fit's.
    let dir = tempfile::tempdir().unwrap();
    let input = standard("area_bands.csv");
    run_ok(dir.path(), &fit_args(&input, "fit.csv"));
    std::fs::rename(dir.path().join("summary.json"), dir.path().join("prior.json")).unwrap();
    let text = std::fs::read_to_string(&input).unwrap();
    let some: Vec<&str> = text.lines().filter(|l| !l.starts_with("district-0")).collect();
    write(dir.path(), "later.csv", &(some.join("\n") + "\n"));
    let mut args = fit_args("later.csv", "scored.csv");
    args[1] = "score";
    args.extend(["--prior", "prior.json"]);
    run_ok(dir.path(), &args);
    let (fit, scored) = (Csv::read(&dir.path().join("fit.csv")), Csv::read(&dir.path().join("scored.csv")));
    let ids = fit.column("district");
    let expected = fit.floats("expected");
    let mut compared = 0;
    for (id, value) in scored.column("district").iter().zip(scored.floats("expected")) {
        let at = ids.iter().position(|d| d == id).unwrap();
        assert_eq!(value, expected[at], "{id}");
        compared += 1;
    }
    assert_eq!(compared, 30);
    let report = summary(&dir.path().join("summary.json"))["standardisation"].clone();
    assert_eq!(
        (report["standard"].as_str(), report["reference_file"].as_str()),
        (Some("saved"), Some("prior.json"))
    );
}

/// `text` (a CSV with a `district` column) with a `region` column after it:
/// north for even district numbers, south for odd.
fn with_regions(text: &str) -> String {
    let mut lines = text.lines();
    let mut out = format!("{},region\n", lines.next().unwrap());
    for line in lines {
        let number: u32 = line.split(',').next().unwrap().trim_start_matches("district-").parse().unwrap();
        out += &format!("{line},{}\n", if number % 2 == 0 { "north" } else { "south" });
    }
    out
}

#[test]
fn segments_of_areas_fit_their_own_priors_on_the_expected_counts() {
    // The same segments run on pandas' observed-and-expected table.
    let dir = tempfile::tempdir().unwrap();
    let bands = std::fs::read_to_string(standard("area_bands.csv")).unwrap();
    write(dir.path(), "bands.csv", &with_regions(&bands));
    let summed = std::fs::read_to_string(standard("expected_internal.csv")).unwrap();
    write(dir.path(), "summed.csv", &with_regions(&summed));
    let segments = ["--by", "region", "--min-groups", "10"];
    let mut args = fit_args("bands.csv", "from_bands.csv");
    args.extend(segments);
    run_ok(dir.path(), &args);
    let mut args =
        vec!["--quiet", "fit", "--model", "gamma-poisson", "--input", "summed.csv", "--group", "district"];
    args.extend([
        "--events",
        "cases",
        "--exposure",
        "expected",
        "--output",
        "from_sums.csv",
        "--summary",
        "sums.json",
    ]);
    args.extend(segments);
    run_ok(dir.path(), &args);
    let (bands, sums) =
        (Csv::read(&dir.path().join("from_bands.csv")), Csv::read(&dir.path().join("from_sums.csv")));
    assert_eq!(bands.column("region"), sums.column("region"));
    for name in ["posterior_mean", "interval_lo", "interval_hi"] {
        for (b, s) in paired(&bands.floats(name), &sums.floats(name), name) {
            assert!(relative(*b, *s) < 1e-10, "{name}: {b} against {s}");
        }
    }
    let segments = summary(&dir.path().join("summary.json"))["segments"].clone();
    assert_eq!(segments.as_array().unwrap().len(), 2);
    assert!(segments[0]["fallback"].is_null(), "each region fits its own prior: {segments}");
}
