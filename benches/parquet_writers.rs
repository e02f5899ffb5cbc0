//! Compares the two Parquet writers that could carry ratepool's output:
//! polars' own writer and arrow-rs's `ArrowWriter`, both with zstd.
//!
//! The table has the shape of a real output: ten float columns whose values
//! depend only on a (trials, successes) pair drawn from a heavy-tailed
//! distribution, so repeated values are as common as in a scored table.
//! Run one writer per process so that peak memory can be read for each:
//!
//! ```text
//! cargo bench --bench parquet_writers -- arrow  10000000 /tmp/out-arrow.parquet
//! cargo bench --bench parquet_writers -- polars 10000000 /tmp/out-polars.parquet
//! ```
//! `benches/parquet_writers.sh` runs both under `/usr/bin/time` several times.
//! Without arguments, as `cargo test` runs it, each writer writes a small
//! table in a temporary folder, so the code cannot rot.

use arrow_array::{ArrayRef, Float64Array, RecordBatch};
use parquet::arrow::ArrowWriter;
use parquet::basic::{Compression, ZstdLevel};
use parquet::file::properties::WriterProperties;
use polars::prelude::*;
use std::sync::Arc;
use std::time::Instant;

mod common;
use common::SplitMix;

const COLUMNS: usize = 10;
const BATCH_ROWS: usize = 1 << 16;

/// One row's values: trials from a Pareto tail, successes near 90%.
fn row(rng: &mut SplitMix) -> [f64; COLUMNS] {
    let trials = (1.0 / (1.0 - rng.unit()).powf(1.0 / 1.1)).floor().min(1e6);
    let successes = (trials * (0.8 + 0.2 * rng.unit())).round();
    let mean = (successes + 18.0) / (trials + 20.0);
    let sd = (mean * (1.0 - mean) / (trials + 21.0)).sqrt();
    [
        trials,
        successes,
        successes / trials,
        mean,
        sd,
        mean - 2.0 * sd,
        mean + 2.0 * sd,
        20.0 / (trials + 20.0),
        successes + 18.0,
        trials - successes + 2.0,
    ]
}

fn columns_of(rows: usize, rng: &mut SplitMix) -> Vec<Vec<f64>> {
    let mut columns: Vec<Vec<f64>> = (0..COLUMNS).map(|_| Vec::with_capacity(rows)).collect();
    for _ in 0..rows {
        for (column, value) in columns.iter_mut().zip(row(rng)) {
            column.push(value);
        }
    }
    columns
}

fn names() -> Vec<String> {
    (0..COLUMNS).map(|c| format!("column_{c}")).collect()
}

/// Calls `write` on successive batches of generated columns, `rows` in all.
fn for_each_batch(rows: usize, mut write: impl FnMut(Vec<Vec<f64>>)) {
    let mut rng = SplitMix(20261202);
    let mut done = 0;
    while done < rows {
        let take = BATCH_ROWS.min(rows - done);
        write(columns_of(take, &mut rng));
        done += take;
    }
}

fn write_arrow(rows: usize, path: &str) {
    let props = WriterProperties::builder()
        .set_compression(Compression::ZSTD(ZstdLevel::default()))
        .set_max_row_group_row_count(Some(1 << 20))
        .build();
    let file = std::fs::File::create(path).expect("create output");
    let mut writer = None;
    for_each_batch(rows, |columns| {
        let arrays = columns.into_iter().map(|c| Arc::new(Float64Array::from(c)) as ArrayRef);
        let batch = RecordBatch::try_from_iter(names().into_iter().zip(arrays)).expect("batch");
        let writer = writer.get_or_insert_with(|| {
            ArrowWriter::try_new(file.try_clone().expect("clone"), batch.schema(), Some(props.clone()))
                .expect("writer")
        });
        writer.write(&batch).expect("write");
    });
    writer.expect("rows > 0").close().expect("close");
}

fn write_polars(rows: usize, path: &str) {
    let file = std::fs::File::create(path).expect("create output");
    let mut writer = None;
    for_each_batch(rows, |columns| {
        let height = columns[0].len();
        let columns =
            columns.into_iter().zip(names()).map(|(values, name)| Column::new(name.into(), values)).collect();
        let frame = DataFrame::new(height, columns).expect("frame");
        let writer = writer.get_or_insert_with(|| {
            ParquetWriter::new(file.try_clone().expect("clone"))
                .with_compression(ParquetCompression::Zstd(None))
                .batched(frame.schema())
                .expect("writer")
        });
        writer.write_batch(&frame).expect("write");
    });
    writer.expect("rows > 0").finish().expect("finish");
}

fn main() {
    let args: Vec<String> = std::env::args().skip(1).filter(|a| a != "--bench").collect();
    if args.is_empty() {
        // As `cargo test` runs it: both writers on a small table, so the code cannot rot.
        let dir = tempfile::tempdir().expect("temporary folder");
        for writer in ["arrow", "polars"] {
            let path = dir.path().join(format!("{writer}.parquet"));
            let path = path.to_str().expect("UTF-8 path");
            match writer {
                "arrow" => write_arrow(100_000, path),
                _ => write_polars(100_000, path),
            }
            assert!(std::fs::metadata(path).expect("written").len() > 0);
            println!("parquet_writers smoke: {writer} wrote 100000 rows");
        }
        return;
    }
    let [writer, rows, path] = args.as_slice() else {
        eprintln!("usage: parquet_writers arrow|polars ROWS PATH");
        std::process::exit(2);
    };
    let rows: usize = rows.parse().expect("ROWS is a whole number");
    let start = Instant::now();
    match writer.as_str() {
        "arrow" => write_arrow(rows, path),
        "polars" => write_polars(rows, path),
        other => panic!("unknown writer {other}"),
    }
    let size = std::fs::metadata(path).map(|m| m.len()).unwrap_or(0);
    println!("{writer}\t{rows}\t{:.3} s\t{:.1} MB", start.elapsed().as_secs_f64(), size as f64 / 1e6);
}
