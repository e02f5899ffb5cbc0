//! The I/O floor of a scoring run: read the same input (CSV or Parquet) in
//! the same batches, once, and write a table of the same rows and column
//! count (the group column, the two count columns and eight float columns
//! copied from the counts) with the same writer and compression, computing
//! nothing.
//!
//! ```text
//! cargo bench --bench io_floor -- IN.parquet|IN.csv ID_COLUMN COUNT_COLUMN SIZE_COLUMN OUT.parquet
//! ```
//! `benches/scale.sh` runs it beside `ratepool fit` on the same files.
//! Without arguments, as `cargo test` runs it, it copies a small table of its
//! own in a temporary folder and checks the row count, so the code cannot rot.

use ratepool::io::cells::NumericColumn;
use ratepool::io::input::Input;
use ratepool::io::sink::{ColumnValues, TableSink};
use std::path::Path;
use std::time::Instant;

const BATCH_ROWS: usize = 65_536;
const FLOAT_COLUMNS: usize = 8;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).filter(|a| a != "--bench").collect();
    if args.is_empty() {
        return smoke();
    }
    let [input, id, count, size, output] = args.as_slice() else {
        eprintln!("usage: io_floor IN.parquet ID_COLUMN COUNT_COLUMN SIZE_COLUMN OUT.parquet");
        std::process::exit(2);
    };
    let start = Instant::now();
    copy(input, id, count, size, output);
    println!("io_floor\t{:.3} s", start.elapsed().as_secs_f64());
}

/// 100,000 invented rows through the floor: every row comes out.
fn smoke() {
    const ROWS: usize = 100_000;
    let dir = tempfile::tempdir().expect("temporary folder");
    let (input, output) = (dir.path().join("in.parquet"), dir.path().join("out.parquet"));
    let mut sink = TableSink::create(&input).expect("input opens");
    let trials: Vec<i64> = (0..ROWS as i64).map(|i| i % 97).collect();
    sink.write(vec![
        ("id".to_string(), ColumnValues::Texts((0..ROWS).map(|i| format!("g{i}")).collect())),
        ("k".to_string(), ColumnValues::Integers(trials.iter().map(|n| n / 3).collect())),
        ("n".to_string(), ColumnValues::Integers(trials)),
    ])
    .expect("input rows");
    sink.finish().and_then(|sealed| sealed.persist()).expect("input written");
    let text = |p: &Path| p.to_str().expect("UTF-8 path").to_string();
    copy(&text(&input), "id", "k", "n", &text(&output));
    let columns = [("id", "group"), ("k", "count"), ("n", "size")];
    let copied = Input::open(&output, b',', &columns, BATCH_ROWS).expect("output opens");
    let mut rows = 0;
    copied
        .for_each_batch(|batch| {
            rows += batch.rows();
            Ok(())
        })
        .expect("output read");
    assert_eq!(rows, ROWS);
    println!("io_floor smoke: {ROWS} rows copied");
}

/// Reads `input` in batches and writes the floor's table to `output`.
fn copy(input: &str, id: &str, count: &str, size: &str, output: &str) {
    let columns = [(id, "group"), (count, "count"), (size, "size")];
    let parts = Input::open(Path::new(input), b',', &columns, BATCH_ROWS).expect("input opens");
    let mut sink = TableSink::create(Path::new(output)).expect("output opens");
    parts
        .for_each_batch(|batch| {
            let group = ColumnValues::Arrow(batch.columns[0].clone());
            let ints = |i: usize| -> ratepool::error::Result<Vec<i64>> {
                let column = NumericColumn::of(&batch.columns[i])?;
                Ok((0..batch.rows()).map(|r| column.integer(r).unwrap_or_default()).collect())
            };
            let (counts, sizes) = (ints(1)?, ints(2)?);
            let mut out = vec![
                (id.to_string(), group),
                (count.to_string(), ColumnValues::Integers(counts.clone())),
                (size.to_string(), ColumnValues::Integers(sizes.clone())),
            ];
            for c in 0..FLOAT_COLUMNS {
                let source = if c % 2 == 0 { &counts } else { &sizes };
                out.push((
                    format!("copy_{c}"),
                    ColumnValues::Floats(source.iter().map(|&v| v as f64).collect()),
                ));
            }
            sink.write(out)
        })
        .expect("rows copied");
    sink.finish().and_then(|sealed| sealed.persist()).expect("output written");
}
