//! The scale paths give the same answers as the plain one: a pre-aggregated
//! pair table (made by DuckDB, `scripts/make_pair_tables.py`) fits the same
//! prior as the raw rows; the same table as a Parquet file, a folder of
//! parts or a CSV file, read in any batch size on any number of threads,
//! writes the same bytes and summary; repeated ids are found across parts.

use crate::util::{fixture, ratepool, stderr, summary};
use arrow_array::{ArrayRef, Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use std::path::Path;
use std::sync::Arc;

fn run_ok(dir: &Path, args: &[&str]) {
    let out = ratepool(dir, args);
    assert!(out.status.success(), "{:?}: {}", args, stderr(&out));
}

/// Fits `raw` (one row per group) and `pairs` (its DuckDB aggregate) and
/// checks the two summaries agree on the prior, exactly.
fn assert_pair_table_fits_the_same_prior(model: &str, raw: &[&str], pairs: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let head = ["--quiet", "fit", "--model", model];
    let raw_args: Vec<&str> =
        head.iter().chain(raw).copied().chain(["--output", "out.csv", "--summary", "raw.json"]).collect();
    let pair_args: Vec<&str> = head.iter().chain(pairs).copied().chain(["--summary", "pairs.json"]).collect();
    run_ok(dir.path(), &raw_args);
    run_ok(dir.path(), &pair_args);
    let (from_raw, from_pairs) =
        (summary(&dir.path().join("raw.json")), summary(&dir.path().join("pairs.json")));
    for field in ["prior", "groups", "level"] {
        assert_eq!(from_raw[field], from_pairs[field], "{field}");
    }
    for field in ["log_marginal_likelihood", "iterations", "gradient_norm", "boundary"] {
        assert_eq!(from_raw["fit"][field], from_pairs["fit"][field], "fit.{field}");
    }
    let mut pull = from_pairs["pull"].clone();
    pull["max_shift_group"] = from_raw["pull"]["max_shift_group"].clone();
    assert_eq!(from_raw["pull"], pull, "pull summary");
}

#[test]
fn a_duckdb_pair_table_fits_the_prior_of_the_raw_rows() {
    let (raw, pairs) = (fixture("beta_binomial_groups.csv"), fixture("beta_binomial_pairs.csv"));
    assert_pair_table_fits_the_same_prior(
        "beta-binomial",
        &["--input", raw.to_str().unwrap(), "--group", "unit", "--successes", "hits", "--trials", "tries"],
        &[
            "--input",
            pairs.to_str().unwrap(),
            "--pair-counts",
            "groups",
            "--successes",
            "successes",
            "--trials",
            "trials",
        ],
    );
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join("marketplace.csv");
    let demo_pairs = fixture("marketplace_pairs.csv");
    let columns = ["--successes", "positive_ratings", "--trials", "total_ratings"];
    let raw: Vec<&str> =
        ["--input", demo.to_str().unwrap(), "--group", "seller_id"].into_iter().chain(columns).collect();
    let pairs: Vec<&str> = ["--input", demo_pairs.to_str().unwrap(), "--pair-counts", "sellers"]
        .into_iter()
        .chain(columns)
        .collect();
    assert_pair_table_fits_the_same_prior("beta-binomial", &raw, &pairs);
    let (raw, pairs) = (fixture("gamma_poisson_areas.csv"), fixture("gamma_poisson_pairs.csv"));
    assert_pair_table_fits_the_same_prior(
        "gamma-poisson",
        &["--input", raw.to_str().unwrap(), "--group", "area", "--events", "cases", "--exposure", "expected"],
        &[
            "--input",
            pairs.to_str().unwrap(),
            "--pair-counts",
            "groups",
            "--events",
            "events",
            "--exposure",
            "exposure",
        ],
    );
}

#[test]
fn a_pair_table_row_that_is_not_a_pair_is_named() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("in.csv"), "n,k,groups\n4,1,2\n3,1,0\n").unwrap();
    let args = ["fit", "--model", "beta-binomial", "--input", "in.csv", "--pair-counts", "groups"];
    let args: Vec<&str> =
        args.into_iter().chain(["--successes", "k", "--trials", "n", "--summary", "s.json"]).collect();
    let out = ratepool(dir.path(), &args);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("row 2, column 'groups'"), "{}", stderr(&out));
    assert!(!dir.path().join("s.json").exists());
    let with_output: Vec<&str> = args.iter().copied().chain(["--output", "o.csv"]).collect();
    let out = ratepool(dir.path(), &with_output);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("--output does not apply to a pair table"), "{}", stderr(&out));
}

/// Writes a Parquet table of (id, k, n) with nulls where given.
fn write_parquet(path: &Path, ids: &[Option<&str>], k: &[Option<i64>], n: &[Option<i64>]) {
    let columns: Vec<(&str, ArrayRef)> = vec![
        ("id", Arc::new(StringArray::from(ids.to_vec()))),
        ("k", Arc::new(Int64Array::from(k.to_vec()))),
        ("n", Arc::new(Int64Array::from(n.to_vec()))),
    ];
    let batch = RecordBatch::try_from_iter(columns).unwrap();
    let mut writer =
        ArrowWriter::try_new(std::fs::File::create(path).unwrap(), batch.schema(), None).unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
}

/// Columns id, k, n of a test table, nullable.
type Table = (Vec<Option<String>>, Vec<Option<i64>>, Vec<Option<i64>>);

/// Invented groups, some repeated pairs, and (when `faults`) a few bad rows.
fn groups(count: usize, faults: bool) -> Table {
    let (mut ids, mut ks, mut ns) = (Vec::new(), Vec::new(), Vec::new());
    for i in 0..count {
        let n = ((i * 7919) % 97) as i64;
        ids.push(Some(format!("g{i:05}")));
        ns.push(Some(n));
        ks.push(Some((n * ((i * 31) % 10) as i64) / 12));
    }
    if faults {
        ids[5] = None;
        ks[17] = Some(ns[17].unwrap() + 1);
        ns[400] = Some(-3);
        ks[401] = None;
    }
    (ids, ks, ns)
}

fn fit_args<'a>(input: &'a str, output: &'a str, summary: &'a str) -> Vec<&'a str> {
    let args = ["--quiet", "fit", "--model", "beta-binomial", "--input", input, "--group", "id"];
    args.into_iter()
        .chain(["--successes", "k", "--trials", "n", "--output", output, "--summary", summary])
        .collect()
}

fn setup(faults: bool) -> tempfile::TempDir {
    let dir = tempfile::tempdir().unwrap();
    let (ids, ks, ns) = groups(3000, faults);
    let ids: Vec<Option<&str>> = ids.iter().map(|s| s.as_deref()).collect();
    write_parquet(&dir.path().join("all.parquet"), &ids, &ks, &ns);
    std::fs::create_dir(dir.path().join("parts")).unwrap();
    write_parquet(&dir.path().join("parts/part-0.parquet"), &ids[..1200], &ks[..1200], &ns[..1200]);
    write_parquet(&dir.path().join("parts/part-1.parquet"), &ids[1200..], &ks[1200..], &ns[1200..]);
    dir
}

/// Writes the table as CSV.
fn write_csv(path: &Path, (ids, ks, ns): &Table) {
    let cell = |v: &Option<i64>| v.map(|v| v.to_string()).unwrap_or_default();
    let mut text = String::from("id,k,n\n");
    for ((id, k), n) in ids.iter().zip(ks).zip(ns) {
        text.push_str(&format!("{},{},{}\n", id.as_deref().unwrap_or(""), cell(k), cell(n)));
    }
    std::fs::write(path, text).unwrap();
}

#[test]
fn a_file_a_folder_of_parts_and_a_csv_give_the_same_bytes_in_any_batch_size() {
    let dir = setup(false);
    write_csv(&dir.path().join("all.csv"), &groups(3000, false));
    run_ok(dir.path(), &fit_args("all.parquet", "whole.parquet", "whole.json"));
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    for (input, batch) in [("all.parquet", "256"), ("parts", "1000"), ("all.csv", "77"), ("all.csv", "65536")]
    {
        let args: Vec<&str> =
            fit_args(input, "got.parquet", "got.json").into_iter().chain(["--batch-rows", batch]).collect();
        run_ok(dir.path(), &args);
        assert_eq!(read("whole.parquet"), read("got.parquet"), "same Parquet bytes from {input} in {batch}");
        assert_eq!(summary(&dir.path().join("whole.json")), summary(&dir.path().join("got.json")));
    }
    // CSV out, from a folder of two parts, batches not aligned to the parts.
    run_ok(dir.path(), &fit_args("all.parquet", "whole.csv", "m.json"));
    let parts: Vec<&str> =
        fit_args("parts", "parts.csv", "p.json").into_iter().chain(["--batch-rows", "1000"]).collect();
    run_ok(dir.path(), &parts);
    assert_eq!(read("whole.csv"), read("parts.csv"), "same CSV bytes from a folder of parts");
}

#[test]
fn a_file_a_folder_of_parts_and_a_csv_reject_the_same_rows() {
    let dir = setup(true);
    write_csv(&dir.path().join("all.csv"), &groups(3000, true));
    let skip = ["--on-invalid", "skip", "--rejects"];
    let whole: Vec<&str> = fit_args("all.parquet", "whole.csv", "m.json")
        .into_iter()
        .chain(skip)
        .chain(["m-rejects.csv"])
        .collect();
    run_ok(dir.path(), &whole);
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    for (input, batch) in [("parts", "100"), ("all.csv", "333")] {
        let args: Vec<&str> = fit_args(input, "got.csv", "s.json")
            .into_iter()
            .chain(skip)
            .chain(["s-rejects.csv", "--batch-rows", batch])
            .collect();
        run_ok(dir.path(), &args);
        assert_eq!(read("whole.csv"), read("got.csv"), "{input}");
        assert_eq!(read("m-rejects.csv"), read("s-rejects.csv"), "{input}");
        assert_eq!(summary(&dir.path().join("m.json")), summary(&dir.path().join("s.json")));
    }
    assert_eq!(read("m-rejects.csv").lines().count(), 5, "header and four bad rows");
    // Without skip, the run stops at the first bad row, naming its part, writing nothing.
    let out = ratepool(dir.path(), &fit_args("parts", "fail.csv", "fail.json"));
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("part-0.parquet: row 6, column 'id'"), "{}", stderr(&out));
    assert!(!dir.path().join("fail.csv").exists() && !dir.path().join("fail.json").exists());
}

#[test]
fn progress_reports_both_passes_to_the_last_row_and_changes_no_output() {
    let dir = setup(false);
    let plain: Vec<&str> =
        fit_args("parts", "plain.parquet", "plain.json").into_iter().chain(["--batch-rows", "500"]).collect();
    run_ok(dir.path(), &plain);
    let watched: Vec<&str> = ["--progress"]
        .into_iter()
        .chain(fit_args("parts", "watched.parquet", "watched.json"))
        .chain(["--batch-rows", "500"])
        .collect();
    let out = ratepool(dir.path(), &watched);
    assert!(out.status.success(), "{}", stderr(&out));
    let report = stderr(&out);
    // The reports within a pass are throttled to one a second; the last one
    // of each pass always comes, in order, and counts every row of both parts.
    let first = report.find("progress pass 1 of 2: 3000 of 3000 rows (100.0%)").expect(&report);
    let fit = report.find("progress fit (").expect(&report);
    let second = report.find("progress pass 2 of 2: 3000 of 3000 rows (100.0%)").expect(&report);
    assert!(first < fit && fit < second, "{report}");
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    assert_eq!(read("plain.parquet"), read("watched.parquet"));
    assert_eq!(summary(&dir.path().join("plain.json")), summary(&dir.path().join("watched.json")));
}

/// Invented groups with many distinct pairs (sizes to 5,000).
fn many_pairs(count: usize) -> Table {
    let mut state: u64 = 20261203;
    let mut next = move || {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        state >> 33
    };
    let (mut ids, mut ks, mut ns) = (Vec::new(), Vec::new(), Vec::new());
    for i in 0..count {
        let n = (next() % 5000) as i64;
        ids.push(Some(format!("g{i:07}")));
        ks.push(Some((n * (next() % 100) as i64) / 100));
        ns.push(Some(n));
    }
    (ids, ks, ns)
}

fn write_table(path: &Path, (ids, ks, ns): &Table, rows: std::ops::Range<usize>) {
    let ids: Vec<Option<&str>> = ids[rows.clone()].iter().map(|s| s.as_deref()).collect();
    write_parquet(path, &ids, &ks[rows.clone()], &ns[rows]);
}

/// 2^21 + 3 rows: past two output row groups, through batch sizes that are
/// not multiples of 1024, a folder of unequal parts and the CSV of the table.
#[test]
fn a_large_input_gives_the_same_bytes_through_any_batches_and_parts() {
    let rows = (1 << 21) + 3;
    let table = many_pairs(rows);
    let dir = tempfile::tempdir().unwrap();
    write_table(&dir.path().join("all.parquet"), &table, 0..rows);
    std::fs::create_dir(dir.path().join("parts")).unwrap();
    let cuts = [0, 700_001, 1_700_000, rows];
    for (i, w) in cuts.windows(2).enumerate() {
        write_table(&dir.path().join(format!("parts/part-{i}.parquet")), &table, w[0]..w[1]);
    }
    write_csv(&dir.path().join("all.csv"), &table);
    run_ok(dir.path(), &fit_args("all.parquet", "whole.parquet", "whole.json"));
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    for (input, batch) in [("all.parquet", "1000"), ("parts", "100003"), ("all.csv", "65537")] {
        let args: Vec<&str> =
            fit_args(input, "got.parquet", "got.json").into_iter().chain(["--batch-rows", batch]).collect();
        run_ok(dir.path(), &args);
        assert!(read("whole.parquet") == read("got.parquet"), "Parquet bytes differ from {input} in {batch}");
        assert_eq!(summary(&dir.path().join("whole.json")), summary(&dir.path().join("got.json")));
    }
}

/// More than 2,048 distinct pairs, so the chunked sums over pairs really run
/// in several chunks, in parallel with two threads.
#[test]
fn one_and_two_threads_give_the_same_bytes_over_many_chunks_of_pairs() {
    let table = many_pairs(40_000);
    let dir = tempfile::tempdir().unwrap();
    write_table(&dir.path().join("all.parquet"), &table, 0..40_000);
    let run = |threads: &str, out: &str, s: &str| {
        let args: Vec<&str> =
            ["--threads", threads].into_iter().chain(fit_args("all.parquet", out, s)).collect();
        run_ok(dir.path(), &args);
    };
    run("1", "one.parquet", "one.json");
    run("2", "two.parquet", "two.json");
    let pairs = summary(&dir.path().join("one.json"))["groups"].as_u64().unwrap();
    assert_eq!(pairs, 40_000);
    let distinct: std::collections::HashSet<(i64, i64)> =
        table.1.iter().zip(&table.2).map(|(k, n)| (k.unwrap(), n.unwrap())).collect();
    assert!(distinct.len() > 3 * 2048, "{} distinct pairs", distinct.len());
    assert_eq!(
        std::fs::read(dir.path().join("one.parquet")).unwrap(),
        std::fs::read(dir.path().join("two.parquet")).unwrap()
    );
    assert_eq!(summary(&dir.path().join("one.json")), summary(&dir.path().join("two.json")));
}

/// A repeated id between two parts, and one at the last row of the last
/// part: refused naming both rows and both parts; with skip, rejected.
#[test]
fn repeated_ids_are_found_across_parts_and_at_the_last_row() {
    let (mut ids, ks, ns) = groups(3000, false);
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir(dir.path().join("parts")).unwrap();
    ids[1500] = ids[10].clone(); // part-1 repeats part-0
    ids[2999] = ids[2000].clone(); // the last row of the last part
    let table = (ids, ks, ns);
    write_table(&dir.path().join("parts/part-0.parquet"), &table, 0..1200);
    write_table(&dir.path().join("parts/part-1.parquet"), &table, 1200..3000);
    let out = ratepool(dir.path(), &fit_args("parts", "o.csv", "s.json"));
    let message = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{message}");
    assert!(message.contains("part-1.parquet: row 301, column 'id'"), "{message}");
    assert!(message.contains("duplicate group id 'g00010' (first at row 11 of"), "{message}");
    assert!(message.contains("part-0.parquet)"), "{message}");
    assert!(!dir.path().join("o.csv").exists() && !dir.path().join("s.json").exists());
    let skip: Vec<&str> = fit_args("parts", "o.csv", "s.json")
        .into_iter()
        .chain(["--on-invalid", "skip", "--rejects", "r.csv", "--batch-rows", "512"])
        .collect();
    run_ok(dir.path(), &skip);
    let rejects = std::fs::read_to_string(dir.path().join("r.csv")).unwrap();
    let lines: Vec<&str> = rejects.lines().collect();
    assert_eq!(lines.len(), 3, "{rejects}");
    assert!(lines[1].starts_with("1501,g00010,") && lines[1].contains("first at row 11 of"), "{rejects}");
    assert!(lines[2].starts_with("3000,g02000,") && lines[2].contains("first at row 801 of"), "{rejects}");
    let s = summary(&dir.path().join("s.json"));
    assert_eq!((s["groups"].as_u64(), s["rows_rejected"].as_u64()), (Some(2998), Some(2)));
    assert_eq!(std::fs::read_to_string(dir.path().join("o.csv")).unwrap().lines().count(), 2999);
}

/// A null integer id is written the same way in the rejects file whatever
/// the input: an empty field.
#[test]
fn a_null_integer_id_is_an_empty_field_in_the_rejects_of_every_input() {
    let dir = tempfile::tempdir().unwrap();
    let ids: Vec<Option<i64>> = (0..40).map(|i| (i != 7).then_some(100 + i)).collect();
    let ks: Vec<i64> = (0..40).map(|i| i % 5).collect();
    let ns: Vec<i64> = (0..40).map(|i| 5 + i % 7).collect();
    let columns: Vec<(&str, ArrayRef)> = vec![
        ("id", Arc::new(Int64Array::from(ids.clone()))),
        ("k", Arc::new(Int64Array::from(ks.clone()))),
        ("n", Arc::new(Int64Array::from(ns.clone()))),
    ];
    let batch = RecordBatch::try_from_iter(columns).unwrap();
    let file = std::fs::File::create(dir.path().join("in.parquet")).unwrap();
    let mut writer = ArrowWriter::try_new(file, batch.schema(), None).unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
    let mut text = String::from("id,k,n\n");
    for ((id, k), n) in ids.iter().zip(&ks).zip(&ns) {
        text.push_str(&format!("{},{k},{n}\n", id.map(|i| i.to_string()).unwrap_or_default()));
    }
    std::fs::write(dir.path().join("in.csv"), text).unwrap();
    for (input, rejects) in [("in.parquet", "r-parquet.csv"), ("in.csv", "r-csv.csv")] {
        let args: Vec<&str> = fit_args(input, "o.csv", "s.json")
            .into_iter()
            .chain(["--on-invalid", "skip", "--rejects", rejects])
            .collect();
        run_ok(dir.path(), &args);
    }
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("r-parquet.csv"), read("r-csv.csv"));
    assert!(read("r-csv.csv").contains("\n8,,2,5,id,group id is missing\n"), "{}", read("r-csv.csv"));
}

/// `--stream`, which once chose the batched layout, is accepted from old
/// scripts and changes nothing.
#[test]
fn the_old_stream_flag_is_accepted_and_changes_nothing() {
    let dir = setup(false);
    run_ok(dir.path(), &fit_args("parts", "plain.parquet", "plain.json"));
    let old: Vec<&str> =
        fit_args("parts", "old.parquet", "old.json").into_iter().chain(["--stream"]).collect();
    run_ok(dir.path(), &old);
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    assert_eq!(read("plain.parquet"), read("old.parquet"));
    assert_eq!(summary(&dir.path().join("plain.json")), summary(&dir.path().join("old.json")));
}

/// `--pair-output`: one row per distinct pair. Joined back to the rows on
/// the two counts it gives each row's own output, value for value; from the
/// DuckDB-made pair table of the demo marketplace (`--pair-counts`, no pass
/// over the rows) it is the same file as from the rows themselves.
#[test]
fn the_pair_output_joins_back_to_the_row_output_and_needs_no_rows() {
    let dir = tempfile::tempdir().unwrap();
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data").join("marketplace.csv");
    let columns =
        ["--successes", "positive_ratings", "--trials", "total_ratings", "--above", "0.9", "--ranks"];
    let rows: Vec<&str> = ["--quiet", "fit", "--model", "beta-binomial", "--input", demo.to_str().unwrap()]
        .into_iter()
        .chain(["--group", "seller_id", "--output", "rows.csv", "--pair-output", "pairs.csv"])
        .chain(columns)
        .collect();
    run_ok(dir.path(), &rows);
    let demo_pairs = fixture("marketplace_pairs.csv");
    let from_pairs: Vec<&str> =
        ["--quiet", "fit", "--model", "beta-binomial", "--input", demo_pairs.to_str().unwrap()]
            .into_iter()
            .chain(["--pair-counts", "sellers", "--summary", "p.json", "--pair-output", "pairs-only.csv"])
            .chain(columns)
            .collect();
    run_ok(dir.path(), &from_pairs);
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("pairs.csv"), read("pairs-only.csv"), "the pair table alone gives the same pair output");
    let (rows, pairs) = (
        crate::util::Csv::read(&dir.path().join("rows.csv")),
        crate::util::Csv::read(&dir.path().join("pairs.csv")),
    );
    assert_eq!(pairs.header[2], "group_count");
    let by_pair: std::collections::HashMap<(String, String), &Vec<String>> =
        pairs.rows.iter().map(|r| ((r[0].clone(), r[1].clone()), r)).collect();
    assert_eq!(by_pair.len(), pairs.rows.len(), "one row per pair");
    let groups: i64 = pairs.column("group_count").iter().map(|g| g.parse::<i64>().unwrap()).sum();
    assert_eq!(groups as usize, rows.rows.len());
    for row in &rows.rows {
        let pair = by_pair[&(row[1].clone(), row[2].clone())];
        // The row: group, counts, then the per-pair columns; the pair row: counts, group_count, the same.
        assert_eq!(&row[3..], &pair[3..], "row {row:?}");
    }
}

/// Past the memory budget the ids' hashes spill to disk in sorted runs and
/// are merged: the same repeats are found, named with both rows, and the
/// same bytes written as when every hash is held.
#[test]
fn repeated_ids_are_found_when_the_hashes_spill_to_disk() {
    // 300,000 groups with --memory-budget 1 (MB): at most 65,536 hashes held, so 4 runs on disk.
    let (mut ids, ks, ns) = groups(300_000, false);
    ids[299_990] = ids[3].clone();
    let dir = tempfile::tempdir().unwrap();
    write_table(&dir.path().join("in.parquet"), &(ids, ks, ns), 0..300_000);
    let budget = |mb: &'static str, output: &'static str, summary: &'static str| -> Vec<&'static str> {
        fit_args("in.parquet", output, summary).into_iter().chain(["--memory-budget", mb]).collect()
    };
    let out = ratepool(dir.path(), &budget("1", "o.csv", "s.json"));
    let message = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{message}");
    assert!(
        message.contains("row 299991, column 'id': duplicate group id 'g00003' (first at row 4)"),
        "{message}"
    );
    assert!(!dir.path().join("o.csv").exists());
    let skip = ["--on-invalid", "skip", "--rejects", "r.csv"];
    let small: Vec<&str> = budget("1", "small.parquet", "small.json").into_iter().chain(skip).collect();
    let large: Vec<&str> = budget("4096", "large.parquet", "large.json").into_iter().chain(skip).collect();
    run_ok(dir.path(), &small);
    run_ok(dir.path(), &large);
    assert_eq!(
        std::fs::read(dir.path().join("small.parquet")).unwrap(),
        std::fs::read(dir.path().join("large.parquet")).unwrap()
    );
    assert_eq!(summary(&dir.path().join("small.json")), summary(&dir.path().join("large.json")));
}
