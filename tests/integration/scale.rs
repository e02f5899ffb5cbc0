//! The scale paths give the same answers as the plain one: a pre-aggregated
//! pair table (made by DuckDB, `scripts/make_pair_tables.py`) fits the same
//! prior as the raw rows, and the streamed two-pass layout writes the same
//! table and summary as the in-memory layout, for a file or a folder of parts.

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
    for field in ["hyperprior", "groups", "level"] {
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

fn stream_args<'a>(input: &'a str, output: &'a str, summary: &'a str) -> Vec<&'a str> {
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

#[test]
fn the_streamed_layout_writes_the_same_bytes_and_summary_as_the_in_memory_one() {
    let dir = setup(false);
    run_ok(dir.path(), &stream_args("all.parquet", "memory.parquet", "memory.json"));
    let streamed: Vec<&str> = stream_args("all.parquet", "streamed.parquet", "streamed.json")
        .into_iter()
        .chain(["--stream", "--batch-rows", "256"])
        .collect();
    run_ok(dir.path(), &streamed);
    let read = |name: &str| std::fs::read(dir.path().join(name)).unwrap();
    assert_eq!(read("memory.parquet"), read("streamed.parquet"), "same Parquet bytes");
    assert_eq!(summary(&dir.path().join("memory.json")), summary(&dir.path().join("streamed.json")));
    // A folder of two parts, batches not aligned to the parts, CSV out.
    run_ok(dir.path(), &stream_args("all.parquet", "memory.csv", "m.json"));
    let parts: Vec<&str> = stream_args("parts", "parts.csv", "p.json")
        .into_iter()
        .chain(["--stream", "--batch-rows", "1000"])
        .collect();
    run_ok(dir.path(), &parts);
    assert_eq!(read("memory.csv"), read("parts.csv"), "same CSV bytes from a folder of parts");
}

#[test]
fn the_streamed_layout_rejects_the_same_rows_as_the_in_memory_one() {
    let dir = setup(true);
    let skip = ["--on-invalid", "skip", "--rejects"];
    let memory: Vec<&str> = stream_args("all.parquet", "memory.csv", "m.json")
        .into_iter()
        .chain(skip)
        .chain(["m-rejects.csv"])
        .collect();
    run_ok(dir.path(), &memory);
    let streamed: Vec<&str> = stream_args("parts", "streamed.csv", "s.json")
        .into_iter()
        .chain(skip)
        .chain(["s-rejects.csv", "--stream", "--batch-rows", "100"])
        .collect();
    run_ok(dir.path(), &streamed);
    let read = |name: &str| std::fs::read_to_string(dir.path().join(name)).unwrap();
    assert_eq!(read("memory.csv"), read("streamed.csv"));
    assert_eq!(read("m-rejects.csv"), read("s-rejects.csv"));
    assert_eq!(read("m-rejects.csv").lines().count(), 5, "header and four bad rows");
    assert_eq!(summary(&dir.path().join("m.json")), summary(&dir.path().join("s.json")));
    // Without skip, the streamed run stops at the first bad row of its part, writing nothing.
    let out = ratepool(
        dir.path(),
        &stream_args("parts", "fail.csv", "fail.json").into_iter().chain(["--stream"]).collect::<Vec<_>>(),
    );
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("part-0.parquet: row 6, column 'id'"), "{}", stderr(&out));
    assert!(!dir.path().join("fail.csv").exists() && !dir.path().join("fail.json").exists());
}

#[test]
fn progress_reports_both_passes_to_the_last_row_and_changes_no_output() {
    let dir = setup(false);
    let plain: Vec<&str> = stream_args("parts", "plain.parquet", "plain.json")
        .into_iter()
        .chain(["--stream", "--batch-rows", "500"])
        .collect();
    run_ok(dir.path(), &plain);
    let watched: Vec<&str> = ["--progress"]
        .into_iter()
        .chain(stream_args("parts", "watched.parquet", "watched.json"))
        .chain(["--stream", "--batch-rows", "500"])
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
