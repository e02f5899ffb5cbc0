//! Faults: a run killed while it writes, a full disk, and files that are not
//! tables. None may leave a partial output behind.

use crate::util::{ratepool, stderr};
use arrow_array::{ArrayRef, Int64Array, RecordBatch};
use parquet::arrow::ArrowWriter;
use std::path::Path;
use std::process::Command;
use std::sync::Arc;
use std::time::Duration;

/// Writes `rows` invented groups (id, k, n) as Parquet.
fn write_groups(path: &Path, rows: i64) {
    let n: Vec<i64> = (0..rows).map(|i| 1 + (i * 7919) % 50).collect();
    let k: Vec<i64> = n.iter().enumerate().map(|(i, &n)| (n * (i as i64 % 10)) / 12).collect();
    let columns: Vec<(&str, ArrayRef)> = vec![
        ("id", Arc::new(Int64Array::from_iter_values(0..rows))),
        ("k", Arc::new(Int64Array::from(k))),
        ("n", Arc::new(Int64Array::from(n))),
    ];
    let batch = RecordBatch::try_from_iter(columns).unwrap();
    let mut writer =
        ArrowWriter::try_new(std::fs::File::create(path).unwrap(), batch.schema(), None).unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
}

const COLUMNS: [&str; 6] = ["--group", "id", "--successes", "k", "--trials", "n"];

fn fit_args(input: &str, output: &str) -> Vec<String> {
    let head = ["--quiet", "fit", "--model", "beta-binomial", "--input", input, "--output", output];
    head.iter().chain(&COLUMNS).map(|s| s.to_string()).collect()
}

fn partial_files(dir: &Path) -> Vec<String> {
    std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().into_string().unwrap())
        .filter(|name| name.ends_with(".partial"))
        .collect()
}

/// Starts a fit of `rows` groups into `out.csv` and kills it (SIGKILL) as
/// soon as its temporary output has grown; false when the run ended before
/// it was seen writing. No deadline: a slow or loaded machine only waits longer.
fn kill_while_writing(dir: &Path, rows: i64) -> bool {
    write_groups(&dir.join("in.parquet"), rows);
    let mut args = fit_args("in.parquet", "out.csv");
    args.extend(["--summary".to_string(), "s.json".to_string()]);
    let mut child =
        Command::new(env!("CARGO_BIN_EXE_ratepool")).current_dir(dir).args(&args).spawn().unwrap();
    let growing = loop {
        let partial = partial_files(dir);
        let size = partial.first().and_then(|name| std::fs::metadata(dir.join(name)).ok()).map(|m| m.len());
        if size.is_some_and(|s| s > 0) {
            break true;
        }
        if child.try_wait().unwrap().is_some() {
            break false;
        }
        std::thread::sleep(Duration::from_millis(5));
    };
    child.kill().unwrap(); // SIGKILL on Unix: no clean-up code runs.
    child.wait().unwrap();
    growing
}

#[test]
fn a_run_killed_while_writing_leaves_the_previous_output_untouched() {
    let dir = tempfile::tempdir().unwrap();
    let previous = b"the previous night's table\n";
    // A machine fast enough to finish before it is seen writing gets a larger input.
    let mut seen = false;
    for rows in [2_000_000, 8_000_000] {
        std::fs::write(dir.path().join("out.csv"), previous).unwrap();
        let _ = std::fs::remove_file(dir.path().join("s.json"));
        if kill_while_writing(dir.path(), rows) {
            seen = true;
            break;
        }
    }
    assert!(seen, "even 8,000,000 rows were written before the run was seen writing");
    assert_eq!(
        std::fs::read(dir.path().join("out.csv")).unwrap(),
        previous,
        "the target was replaced or torn"
    );
    assert!(!dir.path().join("s.json").exists(), "no summary for an unfinished table");
}

#[test]
fn a_full_disk_is_exit_one_and_leaves_no_partial_file() {
    // A file size limit (ulimit -f, 1024-byte blocks) makes writes fail as on a
    // full disk; SIGXFSZ is ignored so the write returns an error instead.
    let dir = tempfile::tempdir().unwrap();
    write_groups(&dir.path().join("in.parquet"), 200_000);
    let binary = env!("CARGO_BIN_EXE_ratepool");
    let args = fit_args("in.parquet", "out.csv").join(" ");
    let out = Command::new("bash")
        .current_dir(dir.path())
        .args(["-c", &format!("trap '' XFSZ; ulimit -f 256; exec {binary} {args} --summary s.json")])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1), "{}", stderr(&out));
    assert!(stderr(&out).contains("out.csv"), "{}", stderr(&out));
    assert!(!dir.path().join("out.csv").exists() && !dir.path().join("s.json").exists());
    assert_eq!(partial_files(dir.path()), Vec::<String>::new());
}

/// Runs a fit on `input` (written with `bytes`) that must fail with exit 2
/// and every needle in the message, leaving only the input behind.
fn assert_bad_table(name: &str, bytes: &[u8], needles: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join(name), bytes).unwrap();
    let out = ratepool(dir.path(), &fit_args(name, "out.csv").iter().map(String::as_str).collect::<Vec<_>>());
    let message = stderr(&out);
    assert_eq!(out.status.code(), Some(2), "{message}");
    for needle in needles {
        assert!(message.contains(needle), "expected '{needle}' in: {message}");
    }
    let left: Vec<_> = std::fs::read_dir(dir.path()).unwrap().map(|e| e.unwrap().file_name()).collect();
    assert_eq!(left.len(), 1, "files left behind: {left:?}");
}

#[test]
fn ragged_rows_and_bad_quotes_name_the_row() {
    assert_bad_table("in.csv", b"id,k,n\na,1,2\nb,1\nc,0,1\n", &["row 2", "2 fields but the header has 3"]);
    assert_bad_table("in.csv", b"id,k,n\na,1,2\nb,1,2,7\n", &["row 2", "4 fields"]);
    assert_bad_table("in.csv", b"id,k,n\na,1,2\n\"b,1,2\nc,0,1\n", &["row 2", "never closed"]);
    assert_bad_table("in.csv", b"id,k,n\n\"a\"z,1,2\n", &["row 1", "closing quote"]);
}

#[test]
fn a_blank_line_is_a_row_of_missing_values() {
    assert_bad_table("in.csv", b"id,k,n\na,1,2\n\nb,5,2\n", &["row 2, column 'id'", "missing"]);
    assert_bad_table("in.csv", b"id,k,n\na,1,2\n\nb,1\n", &["row 3", "2 fields"]);
}

#[test]
fn files_that_are_not_tables_are_bad_input() {
    let png = b"\x89PNG\r\n\x1a\n\0\0\0\rIHDR\0\0\0\x01\0\0\0\x01\x08\x06\0\0\0\x1f\x15\xc4\x89";
    assert_bad_table("in.csv", png, &["in.csv", "not UTF-8"]);
    assert_bad_table("in.parquet", b"{\"id\": 1, \"k\": 2}\n", &["in.parquet", "cannot read the table"]);
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("in.txt"), "id,k,n\na,1,2\n").unwrap();
    let out =
        ratepool(dir.path(), &fit_args("in.txt", "out.csv").iter().map(String::as_str).collect::<Vec<_>>());
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("unknown table format"), "{}", stderr(&out));
}

#[test]
fn a_truncated_parquet_file_is_bad_input() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("whole.parquet");
    write_groups(&path, 10_000);
    let bytes = std::fs::read(&path).unwrap();
    assert_bad_table("in.parquet", &bytes[..bytes.len() / 2], &["in.parquet", "cannot read the table"]);
    // Cut just short of the end (the footer's length and magic): refused too.
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("in.parquet"), &bytes[..bytes.len() - 9]).unwrap();
    let args = fit_args("in.parquet", "out.csv");
    let out = ratepool(dir.path(), &args.iter().map(String::as_str).collect::<Vec<_>>());
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(!dir.path().join("out.csv").exists());
}

#[test]
fn damaged_parquet_metadata_is_bad_input() {
    // Found by the fuzz target (fuzz/regressions/parquet-metadata-thrift-bool):
    // damaged metadata on which polars' Parquet decoder panicked instead of
    // returning an error, when polars read whole files. arrow-rs refuses it
    // with an error; the panic guard stays around every decoder call.
    // The first byte is the harness's control byte.
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fuzz/regressions/parquet-metadata-thrift-bool");
    let bytes = std::fs::read(path).unwrap();
    assert_bad_table("in.parquet", &bytes[1..], &["in.parquet", "cannot read the table"]);
}
