"""The strongest alternative an analyst has for rating rows: DuckDB sums each
seller's positive ratings and counts its ratings with one GROUP BY, written
to Parquet (the table ratepool would then be run on).

usage: python3 benches/peer/duckdb_group_by.py RATINGS.parquet|RATINGS.csv OUT.parquet
"""
import sys

import duckdb


def main() -> None:
    source, out = sys.argv[1], sys.argv[2]
    reader = "read_csv" if source.endswith(".csv") else "read_parquet"
    duckdb.sql(
        f"COPY (SELECT seller_id, sum(positive) AS positive, count(*) AS ratings "
        f"FROM {reader}('{source}') GROUP BY seller_id) TO '{out}' (FORMAT parquet)"
    )


if __name__ == "__main__":
    main()
