//! The I/O floor of a scoring run: read the same Parquet input in the same
//! batches and write a table of the same rows and column count (the group
//! column, the two count columns and eight float columns copied from the
//! counts) with the same writer and compression, computing nothing.
//!
//! ```text
//! cargo bench --bench io_floor -- IN.parquet ID_COLUMN COUNT_COLUMN SIZE_COLUMN OUT.parquet
//! ```
//! `benches/scale.sh` runs it beside `ratepool fit --stream` on the same files.

use arrow_array::cast::AsArray;
use arrow_array::types::Int64Type;
use ratepool::io::sink::{ColumnValues, TableSink};
use ratepool::io::stream::{group_values, ParquetParts};
use std::path::Path;
use std::time::Instant;

const BATCH_ROWS: usize = 65_536;
const FLOAT_COLUMNS: usize = 8;

fn main() {
    let args: Vec<String> = std::env::args().skip(1).filter(|a| a != "--bench").collect();
    let [input, id, count, size, output] = args.as_slice() else {
        eprintln!("usage: io_floor IN.parquet ID_COLUMN COUNT_COLUMN SIZE_COLUMN OUT.parquet");
        std::process::exit(2);
    };
    let start = Instant::now();
    let columns = [(id.as_str(), "group"), (count.as_str(), "count"), (size.as_str(), "size")];
    let parts = ParquetParts::open(Path::new(input), &columns, BATCH_ROWS).expect("input opens");
    let mut sink = TableSink::create(Path::new(output)).expect("output opens");
    parts
        .for_each_batch(|batch| {
            let (group, _) = group_values(&batch.columns[0])?;
            let ints = |i: usize| -> Vec<i64> {
                batch.columns[i].as_primitive::<Int64Type>().iter().map(|v| v.unwrap_or_default()).collect()
            };
            let (counts, sizes) = (ints(1), ints(2));
            let mut out = vec![
                (id.clone(), group),
                (count.clone(), ColumnValues::Integers(counts.clone())),
                (size.clone(), ColumnValues::Integers(sizes.clone())),
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
    sink.finish().expect("output written");
    println!("io_floor\t{:.3} s", start.elapsed().as_secs_f64());
}
