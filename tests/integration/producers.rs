//! Parquet as real producers write it: every file of
//! `tests/fixtures/producers/` (pyarrow, polars and DuckDB from PyPI, through
//! `scripts/make_producer_matrix.py`: codecs, page layouts, column types)
//! must give the same output bytes as the CSV of the same table.

use crate::util::{fixture, ratepool, stderr, Csv};
use arrow_array::{Int64Array, RecordBatch, StringArray};
use parquet::arrow::ArrowWriter;
use parquet::basic::Compression;
use parquet::file::properties::WriterProperties;
use std::path::Path;
use std::sync::Arc;

fn fit(dir: &Path, input: &Path, output: &str, extra: &[&str]) -> Vec<u8> {
    let input = input.to_str().unwrap();
    let mut args =
        vec!["--quiet", "fit", "--input", input, "--model", "beta-binomial", "--group", "seller_id"];
    args.extend(["--successes", "positive", "--trials", "total", "--output", output]);
    args.extend(extra);
    let out = ratepool(dir, &args);
    assert!(out.status.success(), "{input}: {}", stderr(&out));
    std::fs::read(dir.join(output)).unwrap()
}

fn manifest() -> Vec<(String, String)> {
    let text = std::fs::read_to_string(fixture("producers/manifest.json")).unwrap();
    let manifest: serde_json::Value = serde_json::from_str(&text).unwrap();
    let files = manifest["files"].as_object().expect("files");
    files.iter().map(|(name, reference)| (name.clone(), reference.as_str().unwrap().to_string())).collect()
}

/// Every producer's file writes what its CSV writes, in batches of the
/// default size and of 7 rows (row groups of 50 in the pyarrow files).
#[test]
fn every_producers_parquet_gives_the_bytes_of_its_csv() {
    let dir = tempfile::tempdir().unwrap();
    let files = manifest();
    assert!(files.len() >= 90, "the matrix shrank: {}", files.len());
    for reference in ["reference_text_ids.csv", "reference_integer_ids.csv"] {
        let expected = fit(dir.path(), &fixture(&format!("producers/{reference}")), "expected.csv", &[]);
        for (name, _) in files.iter().filter(|(_, r)| r == reference) {
            let path = fixture(&format!("producers/{name}"));
            for extra in [&[][..], &["--batch-rows", "7"][..]] {
                let got = fit(dir.path(), &path, "got.csv", extra);
                assert!(got == expected, "{name} {extra:?}: output differs from {reference}");
            }
        }
    }
}

/// The Hadoop-framed LZ4 codec, which none of the Python producers writes
/// any longer, written by arrow-rs (the library's own writer).
#[test]
fn hadoop_framed_lz4_is_read() {
    let dir = tempfile::tempdir().unwrap();
    let reference = fixture("producers/reference_text_ids.csv");
    let table = Csv::read(&reference);
    let ints = |name: &str| {
        Arc::new(Int64Array::from_iter_values(table.column(name).iter().map(|v| v.parse().unwrap())))
    };
    let ids = Arc::new(StringArray::from(table.column("seller_id")));
    let batch = RecordBatch::try_from_iter([
        ("seller_id", ids as _),
        ("positive", ints("positive") as _),
        ("total", ints("total") as _),
    ])
    .unwrap();
    let path = dir.path().join("lz4.parquet");
    let props = WriterProperties::builder().set_compression(Compression::LZ4).build();
    let mut writer =
        ArrowWriter::try_new(std::fs::File::create(&path).unwrap(), batch.schema(), Some(props)).unwrap();
    writer.write(&batch).unwrap();
    writer.close().unwrap();
    let expected = fit(dir.path(), &reference, "expected.csv", &[]);
    for extra in [&[][..], &["--batch-rows", "7"][..]] {
        assert!(fit(dir.path(), &path, "got.csv", extra) == expected, "{extra:?}");
    }
}
