//! One prior per segment (`--by`): each segment fitted as it would be
//! alone, checked against the scipy fits of the reference fixtures; the
//! fallbacks and their reasons; the likelihood-ratio test; nulls as a
//! segment of their own; reuse by `score --prior`; and bad requests.

use crate::util::{fixture, json_fixture, paired, ratepool, relative, stderr, summary, write, Csv};
use serde_json::Value;
use std::path::Path;

const BETA: [&str; 6] = ["--model", "beta-binomial", "--successes", "hits", "--trials", "tries"];

/// Runs `ratepool` in `dir`, asserting success.
fn run_ok(dir: &Path, args: &[&str]) {
    let out = ratepool(dir, args);
    assert!(out.status.success(), "{args:?}: {}", stderr(&out));
}

/// `fit` over `input` with the beta-binomial columns and `extra` arguments.
fn fit(dir: &Path, input: &str, extra: &[&str]) {
    let mut args = vec!["--quiet", "fit", "--input", input, "--group", "unit"];
    args.extend(BETA);
    args.extend(extra);
    run_ok(dir, &args);
}

/// The rows of the two reference fixtures in one table, with a segment
/// column naming the fixture each came from.
fn two_reference_segments(dir: &Path) -> String {
    let mut text = String::from("unit,kind,hits,tries\n");
    for (name, kind) in [("beta_binomial_groups.csv", "spread"), ("binomial_groups.csv", "even")] {
        let body = std::fs::read_to_string(fixture(name)).unwrap();
        for line in body.lines().skip(1) {
            let (unit, rest) = line.split_once(',').unwrap();
            text.push_str(&format!("{unit},{kind},{rest}\n"));
        }
    }
    write(dir, "both.csv", &text)
}

/// The segment of `segments` whose key has `column` = `value`.
fn segment<'a>(segments: &'a Value, column: &str, value: Option<&str>) -> &'a Value {
    segments
        .as_array()
        .unwrap()
        .iter()
        .find(|s| s["key"][column].as_str() == value)
        .unwrap_or_else(|| panic!("no segment {column}={value:?}"))
}

#[test]
fn each_segment_gets_the_fit_of_its_own_groups_and_the_test_compares_them() {
    // Sources: tests/fixtures/fits.json: the scipy maximiser of the summed
    // betabinom.logpmf for the spread fixture, and scipy.stats.binom.logpmf at
    // the pooled rate for the fixture with no overdispersion (a boundary).
    let reference = json_fixture("fits.json");
    let dir = tempfile::tempdir().unwrap();
    let input = two_reference_segments(dir.path());
    fit(dir.path(), &input, &["--by", "kind", "--output", "out.csv", "--summary", "s.json"]);
    let s = summary(&dir.path().join("s.json"));
    assert_eq!(s["segment_columns"], serde_json::json!(["kind"]));
    let spread = segment(&s["segments"], "kind", Some("spread"));
    for key in ["alpha", "beta"] {
        let (got, want) =
            (spread["prior"][key].as_f64().unwrap(), reference["beta_binomial"][key].as_f64().unwrap());
        assert!(relative(got, want) < 1e-6, "{key}: {got} vs {want}");
    }
    assert_eq!(spread["groups"], 400);
    assert!(spread["fallback"].is_null());
    let even = segment(&s["segments"], "kind", Some("even"));
    assert_eq!(even["fit"]["boundary"], "no-overdispersion", "a boundary is a result");
    assert!(even["fallback"].is_null(), "a boundary is not a fallback");
    let pooled = reference["binomial_boundary"]["mean"].as_f64().unwrap();
    assert!(relative(even["prior"]["mean"].as_f64().unwrap(), pooled) < 1e-12);
    // The statistic from the references' log marginal likelihoods and the
    // run's all-groups fit; with two degrees of freedom the chi-square tail
    // is exp(-x/2) (a handbook formula).
    let own = reference["beta_binomial"]["log_marginal_likelihood"].as_f64().unwrap()
        + reference["binomial_boundary"]["log_likelihood"].as_f64().unwrap();
    let all = s["fit"]["log_marginal_likelihood"].as_f64().unwrap();
    let test = &s["segment_test"];
    assert_eq!(test["degrees_of_freedom"], 2);
    let statistic = test["statistic"].as_f64().unwrap();
    assert!((statistic - 2.0 * (own - all)).abs() < 1e-5, "{statistic} vs {}", 2.0 * (own - all));
    assert!(relative(test["p_value"].as_f64().unwrap(), (-statistic / 2.0).exp()) < 1e-12);
    let out = Csv::read(&dir.path().join("out.csv"));
    assert_eq!(&out.header[..4], ["unit", "kind", "hits", "tries"], "segment columns beside the group");
    assert!(out.column("prior_fallback").iter().all(|f| f == "false"));
}

#[test]
fn a_segment_scores_exactly_as_a_fit_of_that_segment_alone() {
    let dir = tempfile::tempdir().unwrap();
    let input = two_reference_segments(dir.path());
    fit(dir.path(), &input, &["--by", "kind", "--output", "by.csv", "--above", "0.3"]);
    let by = Csv::read(&dir.path().join("by.csv"));
    for (kind, fixture_name) in [("spread", "beta_binomial_groups.csv"), ("even", "binomial_groups.csv")] {
        let alone = fixture(fixture_name);
        let output = format!("{kind}.csv");
        fit(dir.path(), alone.to_str().unwrap(), &["--output", &output, "--above", "0.3"]);
        let alone = Csv::read(&dir.path().join(&output));
        let kinds = by.column("kind");
        let rows: Vec<Vec<String>> = by
            .rows
            .iter()
            .zip(&kinds)
            .filter(|(_, k)| *k == kind)
            .map(|(row, _)| {
                // Without the segment column and prior_fallback, the same columns.
                let mut row = row.clone();
                row.remove(by.header.iter().position(|h| h == "prior_fallback").unwrap());
                row.remove(1);
                row
            })
            .collect();
        assert_eq!(rows, alone.rows, "segment {kind}");
    }
}

#[test]
fn small_segments_and_segments_with_only_a_mean_fall_back_with_their_reason() {
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::from("unit,shop,hits,tries\n");
    let spread = std::fs::read_to_string(fixture("beta_binomial_groups.csv")).unwrap();
    for line in spread.lines().skip(1) {
        let (unit, rest) = line.split_once(',').unwrap();
        text.push_str(&format!("{unit},big,{rest}\n"));
    }
    // 40 groups of one trial each: only the mean is identifiable.
    for i in 0..40 {
        text.push_str(&format!("single{i},one-trial,{},1\n", i % 3 % 2));
    }
    // Five groups: fewer than the default 30.
    for i in 0..5 {
        text.push_str(&format!("few{i},small,{i},10\n"));
    }
    // A null shop value: its own segment, also small.
    text.push_str("nobody1,,3,9\nnobody2,,1,9\n");
    let input = write(dir.path(), "shops.csv", &text);
    let args =
        ["--by", "shop", "--output", "out.parquet", "--summary", "s.json", "--pair-output", "pairs.csv"];
    fit(dir.path(), &input, &args);
    let s = summary(&dir.path().join("s.json"));
    let segments = &s["segments"];
    assert_eq!(segments.as_array().unwrap().len(), 4);
    assert!(segment(segments, "shop", Some("big"))["fallback"].is_null());
    let reason =
        |value: Option<&str>| segment(segments, "shop", value)["fallback"].as_str().unwrap().to_string();
    assert!(reason(Some("one-trial")).contains("only the prior mean"), "{}", reason(Some("one-trial")));
    assert_eq!(reason(Some("small")), "fewer than 30 groups (5)");
    assert_eq!(reason(None), "fewer than 30 groups (2)");
    let null_segment = segment(segments, "shop", None);
    assert_eq!(null_segment["prior"], s["prior"], "the all-groups prior");
    assert!(null_segment["fit"].is_null());
    assert_eq!(s["segment_test"]["degrees_of_freedom"], 2, "one segment of its own plus the shared prior");
    // With --min-groups 3 the five-group segment gets its own fit.
    fit(
        dir.path(),
        &input,
        &["--by", "shop", "--min-groups", "3", "--output", "low.csv", "--summary", "low.json"],
    );
    let low = summary(&dir.path().join("low.json"));
    assert!(segment(&low["segments"], "shop", Some("small"))["fallback"].is_null());
    // The pair output keeps the null segment apart, and says who fell back.
    let pairs = Csv::read(&dir.path().join("pairs.csv"));
    assert_eq!(pairs.header[..4], ["shop", "hits", "tries", "group_count"]);
    let fallback: Vec<(String, String)> =
        pairs.column("shop").into_iter().zip(pairs.column("prior_fallback")).collect();
    assert!(fallback.contains(&(String::new(), "true".to_string())));
    assert!(fallback.iter().filter(|(shop, _)| shop == "big").all(|(_, f)| f == "false"));
}

#[test]
fn score_uses_each_segments_saved_prior_and_the_all_groups_prior_for_unseen_segments() {
    let dir = tempfile::tempdir().unwrap();
    let input = two_reference_segments(dir.path());
    fit(dir.path(), &input, &["--by", "kind", "--output", "fit.csv", "--summary", "s.json"]);
    let scored = |input: &str, output: &str, summary_file: &str| {
        let mut args = vec!["--quiet", "score", "--prior", "s.json", "--input", input, "--group", "unit"];
        args.extend(&BETA[2..]);
        args.extend(["--by", "kind", "--output", output, "--summary", summary_file]);
        run_ok(dir.path(), &args);
    };
    scored(&input, "again.csv", "again.json");
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("again.csv"), read("fit.csv"), "the saved priors reproduce the fit's output");
    let renamed = read(&input).replace(",even,", ",new,");
    let renamed = write(dir.path(), "renamed.csv", &renamed);
    scored(&renamed, "renamed-out.csv", "renamed.json");
    let out = Csv::read(&dir.path().join("renamed-out.csv"));
    for (kind, fallback) in out.column("kind").iter().zip(out.column("prior_fallback")) {
        assert_eq!(fallback == "true", kind == "new", "{kind}");
    }
    let s = summary(&dir.path().join("renamed.json"));
    assert_eq!(segment(&s["segments"], "kind", Some("new"))["fallback"], "not in the saved prior's segments");
    // A summary fitted by other columns is refused, naming both.
    let mut args = vec!["score", "--prior", "s.json", "--input", &input, "--group", "unit"];
    args.extend(&BETA[2..]);
    args.extend(["--by", "unit2", "--output", "x.csv"]);
    let text = read(&input)
        .replace("unit,kind,", "unit,kind,unit2,")
        .replace(",spread,", ",spread,x,")
        .replace(",even,", ",even,y,");
    let other = write(dir.path(), "other.csv", &text);
    args[4] = &other;
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("fitted with segments by [kind], not by [unit2]"), "{}", stderr(&out));
    assert!(!dir.path().join("x.csv").exists());
}

#[test]
fn pair_tables_take_segment_columns_and_give_the_rows_fit() {
    let dir = tempfile::tempdir().unwrap();
    let input = two_reference_segments(dir.path());
    fit(
        dir.path(),
        &input,
        &[
            "--by",
            "kind",
            "--output",
            "rows.csv",
            "--summary",
            "rows.json",
            "--pair-output",
            "rows-pairs.csv",
        ],
    );
    // The pair table a warehouse would make: GROUP BY kind, hits, tries.
    let rows = Csv::read(&dir.path().join(&input));
    let mut counts: std::collections::BTreeMap<(String, String, String), u64> = Default::default();
    for row in &rows.rows {
        *counts.entry((row[1].clone(), row[2].clone(), row[3].clone())).or_default() += 1;
    }
    let mut text = String::from("kind,hits,tries,units\n");
    for ((kind, hits, tries), units) in counts {
        text.push_str(&format!("{kind},{hits},{tries},{units}\n"));
    }
    let pairs = write(dir.path(), "pairs.csv", &text);
    let mut args = vec!["--quiet", "fit", "--input", &pairs, "--pair-counts", "units", "--by", "kind"];
    args.extend(BETA);
    args.extend(["--summary", "pairs.json", "--pair-output", "pairs-out.csv"]);
    run_ok(dir.path(), &args);
    let (from_rows, from_pairs) =
        (summary(&dir.path().join("rows.json")), summary(&dir.path().join("pairs.json")));
    assert_eq!(from_rows["segments"].as_array().unwrap().len(), 2);
    let segments = (from_rows["segments"].as_array().unwrap(), from_pairs["segments"].as_array().unwrap());
    for (a, b) in paired(segments.0, segments.1, "segments") {
        assert_eq!(a["prior"], b["prior"]);
        assert_eq!(a["key"], b["key"]);
    }
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("rows-pairs.csv"), read("pairs-out.csv"));
}

#[test]
fn bad_segment_requests_are_refused_before_anything_is_written() {
    let dir = tempfile::tempdir().unwrap();
    let input = two_reference_segments(dir.path());
    let refusals: [(&[&str], &str); 4] = [
        (&["--by", "region"], "no column 'region' (given as the segment column)"),
        (&["--by", "kind,kind"], "names the column 'kind' twice"),
        (&["--by", "hits"], "cannot name 'hits'"),
        (&["--by", "unit"], "cannot name 'unit'"),
    ];
    for (extra, message) in refusals {
        let mut args = vec!["fit", "--input", &input, "--group", "unit"];
        args.extend(BETA);
        args.extend(["--output", "out.csv"]);
        args.extend(extra);
        crate::util::assert_refused(dir.path(), &args, message, "out.csv");
    }
}

#[test]
fn segmented_output_is_the_same_bytes_for_any_batch_size_and_thread_count() {
    let dir = tempfile::tempdir().unwrap();
    let input = two_reference_segments(dir.path());
    let runs: [(&str, &[&str]); 3] =
        [("a.parquet", &[]), ("b.parquet", &["--batch-rows", "7"]), ("c.parquet", &["--threads", "1"])];
    for (output, extra) in runs {
        let mut args =
            vec!["--by", "kind", "--output", output, "--above", "0.2", "--flag-fdr", "0.1", "--ranks"];
        args.extend(extra);
        if extra.first() == Some(&"--threads") {
            let mut all = vec!["--threads", "1", "--quiet", "fit", "--input", &input, "--group", "unit"];
            all.extend(BETA);
            all.extend(&args[..args.len() - 2]);
            run_ok(dir.path(), &all);
        } else {
            fit(dir.path(), &input, &args);
        }
    }
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    assert_eq!(read("a.parquet"), read("b.parquet"));
    assert_eq!(read("a.parquet"), read("c.parquet"));
}

/// Writes `input`'s rows as Parquet with the segment column `kind` as
/// `dictionary` (an arrow dictionary column) or plain text (arrow-rs still
/// writes dictionary pages), nulls where the CSV field is empty.
fn as_parquet(dir: &Path, input: &str, output: &str, dictionary: bool) {
    use arrow_array::types::Int32Type;
    use arrow_array::{ArrayRef, DictionaryArray, Int64Array, RecordBatch, StringArray};
    use std::sync::Arc;
    let table = Csv::read(&dir.join(input));
    let kinds: Vec<Option<String>> =
        table.column("kind").into_iter().map(|k| (!k.is_empty()).then_some(k)).collect();
    let kind: ArrayRef = if dictionary {
        Arc::new(kinds.iter().map(|k| k.as_deref()).collect::<DictionaryArray<Int32Type>>())
    } else {
        Arc::new(StringArray::from(kinds))
    };
    let int = |name: &str| -> ArrayRef {
        Arc::new(Int64Array::from(
            table.column(name).iter().map(|v| v.parse::<i64>().unwrap()).collect::<Vec<_>>(),
        ))
    };
    let batch = RecordBatch::try_from_iter([
        ("unit", Arc::new(StringArray::from(table.column("unit"))) as ArrayRef),
        ("kind", kind),
        ("hits", int("hits")),
        ("tries", int("tries")),
    ])
    .unwrap();
    let file = std::fs::File::create(dir.join(output)).unwrap();
    let mut writer = parquet::arrow::ArrowWriter::try_new(file, batch.schema(), None).unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
}

#[test]
fn parquet_segments_read_as_dictionaries_or_text_give_the_csv_output() {
    let dir = tempfile::tempdir().unwrap();
    let both = two_reference_segments(dir.path());
    // Some null segment values, a third segment of their own.
    let text = std::fs::read_to_string(dir.path().join(&both)).unwrap();
    let text: String = text
        .lines()
        .enumerate()
        .map(|(i, l)| if i % 7 == 3 { l.replacen(",spread,", ",,", 1) } else { l.to_string() } + "\n")
        .collect();
    let input = write(dir.path(), "with-nulls.csv", &text);
    as_parquet(dir.path(), &input, "dictionary.parquet", true);
    as_parquet(dir.path(), &input, "text.parquet", false);
    let args = ["--by", "kind", "--above", "0.3", "--pair-output"];
    fit(dir.path(), &input, &[&args[..], &["csv-pairs.csv", "--output", "from-csv.csv"]].concat());
    for parquet in ["dictionary.parquet", "text.parquet"] {
        let (output, pairs) = (format!("{parquet}.csv"), format!("{parquet}-pairs.csv"));
        fit(
            dir.path(),
            parquet,
            &[&args[..], &[&pairs, "--output", &output, "--batch-rows", "100"]].concat(),
        );
        let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
        assert_eq!(read(&output), read("from-csv.csv"), "{parquet}");
        assert_eq!(read(&pairs), read("csv-pairs.csv"), "{parquet}");
    }
    let out = Csv::read(&dir.path().join("from-csv.csv"));
    assert!(out.column("kind").iter().any(String::is_empty), "the null segment is written as null");
    // The Parquet output's segment column (dictionary pages written by
    // ratepool's own pair-column encoder), read back by arrow-rs.
    fit(
        dir.path(),
        "dictionary.parquet",
        &["--by", "kind", "--output", "out.parquet", "--batch-rows", "100"],
    );
    let file = std::fs::File::open(dir.path().join("out.parquet")).unwrap();
    let reader = parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder::try_new(file)
        .unwrap()
        .build()
        .unwrap();
    let mut kinds: Vec<String> = Vec::new();
    for batch in reader {
        let batch = batch.unwrap();
        let column =
            arrow_cast::cast(batch.column_by_name("kind").unwrap(), &arrow_schema::DataType::Utf8).unwrap();
        let column = column.as_any().downcast_ref::<arrow_array::StringArray>().unwrap();
        kinds.extend(column.iter().map(|k| k.unwrap_or("").to_string()));
    }
    assert_eq!(kinds, out.column("kind"));
}
