"""Synthetic rating rows for the summing benchmark: one row per rating, as a
marketplace keeps them, for `ratepool fit --outcome`.

Each of SELLERS invented sellers (`s0000000` ...) gets 1 + floor(lognormal(ln 43, 1.3))
ratings, capped at 20,000 (about 100 a seller on average), and a true positive
share from Beta(18, 2); each rating is positive (1) or not (0). The rows are
shuffled over the whole file, so a seller's ratings are spread over every row
group. Columns: `seller_id` (text; pyarrow writes it dictionary-encoded, as
it does by default) and `positive` (8-bit integer 0/1).

The rows are made from one stream of a fixed seed and written in row groups
of 1,048,576 rows (pyarrow's default). An output named `*.csv` is the same
rows as CSV, the ids quoted as pyarrow's writer quotes text.

usage: python3 benches/generate_ratings.py SELLERS OUT.parquet|OUT.csv
"""
import sys

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

SEED = 20261204
WRITE_CHUNK = 8 * 1_048_576
ROW_GROUP = 1_048_576


def main() -> None:
    sellers, out = int(sys.argv[1]), sys.argv[2]
    stream = np.random.default_rng(SEED)
    ratings = np.minimum(1 + np.floor(stream.lognormal(np.log(43.0), 1.3, sellers)), 20_000).astype(np.int64)
    share = stream.beta(18.0, 2.0, sellers)
    seller_of_row = np.repeat(np.arange(sellers, dtype=np.int32), ratings)
    positive = (stream.random(seller_of_row.size) < share[seller_of_row]).astype(np.int8)
    order = stream.permutation(seller_of_row.size)
    seller_of_row, positive = seller_of_row[order], positive[order]
    del order
    names = pa.array([f"s{i:07d}" for i in range(sellers)], pa.string())
    schema = pa.schema([("seller_id", pa.string()), ("positive", pa.int8())])
    writer = pacsv.CSVWriter(out, schema) if out.endswith(".csv") else pq.ParquetWriter(out, schema)
    for start in range(0, seller_of_row.size, WRITE_CHUNK):
        end = min(start + WRITE_CHUNK, seller_of_row.size)
        ids = names.take(pa.array(seller_of_row[start:end]))
        table = pa.table({"seller_id": ids, "positive": pa.array(positive[start:end])}, schema=schema)
        if out.endswith(".csv"):
            writer.write_table(table)
        else:
            writer.write_table(table, row_group_size=ROW_GROUP)
    writer.close()
    print(f"{seller_of_row.size} rows for {sellers} sellers", file=sys.stderr)


if __name__ == "__main__":
    main()
