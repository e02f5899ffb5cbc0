//! The Parquet and Arrow IPC outputs hold exactly the values of the CSV
//! output, read back with arrow-rs's readers: nulls where the raw rate or the
//! posterior parameters are absent, several row groups and data pages, and a
//! table under complete pooling.

use crate::util::{fixture, ratepool, stderr, Csv};
use arrow_array::cast::AsArray;
use arrow_array::types::{Float64Type, Int64Type};
use arrow_array::{Array, RecordBatch};
use arrow_schema::DataType;
use parquet::arrow::arrow_reader::ParquetRecordBatchReaderBuilder;
use std::path::Path;

/// Every batch of an Arrow IPC file.
fn read_arrow(path: &Path) -> Vec<RecordBatch> {
    let file = std::fs::File::open(path).unwrap();
    arrow_ipc::reader::FileReader::try_new(file, None).unwrap().map(Result::unwrap).collect()
}

/// Every batch of a Parquet file.
fn read_parquet(path: &Path) -> Vec<RecordBatch> {
    let file = std::fs::File::open(path).unwrap();
    ParquetRecordBatchReaderBuilder::try_new(file).unwrap().build().unwrap().map(Result::unwrap).collect()
}

/// A Parquet table as CSV-like text cells, in the CSV writer's number format.
fn cells(batches: &[RecordBatch]) -> (Vec<String>, Vec<Vec<String>>) {
    let schema = batches[0].schema();
    let header = schema.fields().iter().map(|f| f.name().clone()).collect();
    let mut rows = Vec::new();
    for batch in batches {
        for row in 0..batch.num_rows() {
            let cell = |column: &dyn Array| -> String {
                if column.is_null(row) {
                    return String::new();
                }
                match column.data_type() {
                    DataType::Int64 => column.as_primitive::<Int64Type>().value(row).to_string(),
                    DataType::Float64 => {
                        ryu::Buffer::new().format(column.as_primitive::<Float64Type>().value(row)).to_string()
                    }
                    _ => column.as_string::<i32>().value(row).to_string(),
                }
            };
            rows.push(batch.columns().iter().map(|c| cell(c.as_ref())).collect());
        }
    }
    (header, rows)
}

fn assert_parquet_matches_csv(input: &Path, model_args: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    for output in ["out.csv", "out.parquet", "out.arrow"] {
        let mut args = vec!["--quiet", "fit", "--input", input.to_str().unwrap()];
        args.extend(model_args);
        args.extend(["--output", output]);
        let out = ratepool(dir.path(), &args);
        assert!(out.status.success(), "{}", stderr(&out));
    }
    let csv = Csv::read(&dir.path().join("out.csv"));
    let parquet = read_parquet(&dir.path().join("out.parquet"));
    let arrow = read_arrow(&dir.path().join("out.arrow"));
    for (format, batches) in [("parquet", parquet), ("arrow", arrow)] {
        let (header, rows) = cells(&batches);
        assert_eq!(header, csv.header, "{format}");
        assert_eq!(rows.len(), csv.rows.len(), "{format}");
        for (i, (got, expected)) in rows.iter().zip(&csv.rows).enumerate() {
            assert_eq!(got, expected, "{format}: row {}", i + 1);
        }
    }
}

/// 1,300,007 groups (two row groups, several pages), some with no trials.
#[test]
fn parquet_output_holds_the_csv_outputs_values_over_row_groups_and_pages() {
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::from("id,k,n\n");
    let mut state: u64 = 7;
    for i in 0..1_300_007u64 {
        state = state.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        let n = (state >> 40) % 60;
        let k = if n == 0 { 0 } else { (state >> 20) % (n + 1) * (state >> 10) % 3 / 2 % (n + 1) };
        text.push_str(&format!("g{i},{k},{n}\n"));
    }
    let input = dir.path().join("in.csv");
    std::fs::write(&input, text).unwrap();
    let args = ["--model", "beta-binomial", "--group", "id", "--successes", "k", "--trials", "n"];
    assert_parquet_matches_csv(&input, &args);
}

#[test]
fn parquet_output_of_the_gamma_model_and_of_complete_pooling_hold_the_csv_values() {
    let areas =
        ["--model", "gamma-poisson", "--group", "area", "--events", "cases", "--exposure", "expected"];
    assert_parquet_matches_csv(&fixture("gamma_poisson_areas.csv"), &areas);
    // The binomial fixture has no overdispersion: every posterior parameter is null.
    let groups = ["--model", "beta-binomial", "--group", "unit", "--successes", "hits", "--trials", "tries"];
    assert_parquet_matches_csv(&fixture("binomial_groups.csv"), &groups);
}

#[test]
fn the_parquet_footer_says_what_model_and_prior_made_the_table() {
    use parquet::file::reader::{FileReader, SerializedFileReader};
    let dir = tempfile::tempdir().unwrap();
    let input = crate::util::fixture("rows/returns_summed.csv");
    let args = [
        "--quiet",
        "fit",
        "--model",
        "beta-binomial",
        "--input",
        input.to_str().unwrap(),
        "--group",
        "store",
    ];
    let mut args = args.to_vec();
    args.extend([
        "--successes",
        "successes",
        "--trials",
        "trials",
        "--by",
        "kind",
        "--intervals",
        "corrected",
    ]);
    args.extend(["--output", "out.parquet", "--summary", "s.json", "--pair-output", "pairs.parquet"]);
    let out = crate::util::ratepool(dir.path(), &args);
    assert!(out.status.success(), "{}", crate::util::stderr(&out));
    let s = crate::util::summary(&dir.path().join("s.json"));
    for file in ["out.parquet", "pairs.parquet"] {
        let reader = SerializedFileReader::new(std::fs::File::open(dir.path().join(file)).unwrap()).unwrap();
        let pairs = reader.metadata().file_metadata().key_value_metadata().cloned().unwrap_or_default();
        let value = |key: &str| {
            pairs
                .iter()
                .find(|kv| kv.key == key)
                .and_then(|kv| kv.value.clone())
                .unwrap_or_else(|| panic!("{file}: no {key}"))
        };
        assert_eq!(value("ratepool.model"), "beta-binomial");
        assert_eq!(value("ratepool.intervals"), "corrected");
        assert_eq!(value("ratepool.level"), "0.95");
        assert_eq!(value("ratepool.version"), env!("CARGO_PKG_VERSION"));
        let prior: serde_json::Value = serde_json::from_str(&value("ratepool.prior")).unwrap();
        assert_eq!(prior, s["prior"], "{file}");
        let segments: serde_json::Value = serde_json::from_str(&value("ratepool.segments")).unwrap();
        assert_eq!(segments.as_array().unwrap().len(), s["segments"].as_array().unwrap().len());
        assert_eq!(segments[0]["prior"], s["segments"][0]["prior"]);
    }
}
