"""The pair posterior table joined back to the rows by DuckDB (from PyPI),
as a warehouse would, for tests/integration/decisions.rs:

pair_join/pairs.parquet  ratepool's --pair-output for the summed returns
                         (tests/fixtures/rows/returns_summed.csv) with segments
                         by kind, --above 0.1, --flag-fdr 0.1 and --ranks
pair_join/joined.csv     DuckDB: every row of the input joined to its pair
                         on (kind, successes, trials), in input order

The test runs ratepool again and checks that its pair output is these same
bytes and that its own per-row output equals DuckDB's join, value for value.
Rerun after a change to any output column.

usage (from the repository root, after `cargo build --release`):
    python3 scripts/make_pair_join_fixtures.py [path/to/ratepool]
"""
import subprocess
import sys

import duckdb

RATEPOOL = sys.argv[1] if len(sys.argv) > 1 else "target/release/ratepool"
INPUT = "tests/fixtures/rows/returns_summed.csv"
OUT = "tests/fixtures/pair_join"

subprocess.run(
    [RATEPOOL, "--quiet", "fit", "--model", "beta-binomial", "--input", INPUT, "--group", "store",
     "--successes", "successes", "--trials", "trials", "--by", "kind", "--above", "0.1",
     "--flag-fdr", "0.1", "--ranks", "--output", "/tmp/pair-join-rows.csv",
     "--pair-output", f"{OUT}/pairs.parquet"],
    check=True,
)
duckdb.sql(f"""
    COPY (
        SELECT g.store, g.kind, g.successes, g.trials,
               p.* EXCLUDE (kind, successes, trials, group_count)
        FROM (SELECT *, row_number() OVER () AS position FROM read_csv('{INPUT}')) g
        JOIN '{OUT}/pairs.parquet' p USING (kind, successes, trials)
        ORDER BY g.position
    ) TO '{OUT}/joined.csv' (HEADER)
""")
print(duckdb.sql(f"SELECT count(*) FROM '{OUT}/joined.csv'").fetchall())
