//! The I/O floor of a scoring run: read the same input (CSV or Parquet) in
//! the same batches, once, and write a table of the same rows and column
//! count with the same writer and compression: the group column, then ten
//! columns whose values come from a table of 65,536 "pairs" indexed by a
//! hash of the row's two counts (standing in for the pair number, which
//! needs the first pass), computing nothing else.
//!
//! ```text
//! cargo bench --bench io_floor -- IN.parquet|IN.csv ID_COLUMN COUNT_COLUMN SIZE_COLUMN OUT.parquet
//! ```
//! `benches/scale.sh` runs it beside `ratepool fit` on the same files.
//! Without arguments, as `cargo test` runs it, it copies a small table of its
//! own in a temporary folder and checks the row count, so the code cannot rot.

use ratepool::io::cells::{GroupColumn, NumericColumn};
use ratepool::io::input::Input;
use ratepool::io::sink::{ColumnValues, PairValues, TableSink};
use std::path::Path;
use std::time::Instant;

const BATCH_ROWS: usize = 65_536;
const STAND_IN_PAIRS: usize = 1 << 16;

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
    let stand_in = |f: fn(usize) -> f64| PairValues::Floats((0..STAND_IN_PAIRS).map(f).collect());
    let mut pair_columns = vec![
        (count.to_string(), PairValues::Integers((0..STAND_IN_PAIRS as i64).collect())),
        (size.to_string(), PairValues::Integers((0..STAND_IN_PAIRS as i64).map(|i| i * 3).collect())),
        (
            "raw_proportion".to_string(),
            PairValues::OptionalFloats(
                (0..STAND_IN_PAIRS).map(|i| (i > 0).then(|| 1.0 / i as f64)).collect(),
            ),
        ),
    ];
    for c in 0..7 {
        pair_columns.push((format!("copy_{c}"), stand_in(|i| (i as f64).sqrt())));
    }
    let mut sink = TableSink::create_scored(Path::new(output), pair_columns).expect("output opens");
    parts
        .for_each_batch(|batch| {
            let group = GroupColumn::of(&batch.columns[0])?;
            let (counts, sizes) =
                (NumericColumn::of(&batch.columns[1])?, NumericColumn::of(&batch.columns[2])?);
            let rows: Vec<u32> = (0..batch.rows() as u32).collect();
            let pair_of_row: Vec<u32> = (0..batch.rows())
                .map(|r| {
                    let key =
                        counts.integer(r).unwrap_or_default() * 31 + sizes.integer(r).unwrap_or_default();
                    (key as u64 % STAND_IN_PAIRS as u64) as u32
                })
                .collect();
            sink.write_scored(vec![(id.to_string(), group.take(&rows))], &pair_of_row)
        })
        .expect("rows copied");
    sink.finish().and_then(|sealed| sealed.persist()).expect("output written");
}
