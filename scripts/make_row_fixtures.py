"""Inputs whose rows are not groups, and the same data summed per group by
DuckDB (from PyPI), for the byte-for-byte checks in
tests/integration/aggregation.rs:

rows/returns.csv           one row per invented order: store, store kind, and
                           whether it came back (written as 0/1, true/false,
                           TRUE or 1.0: every accepted form)
rows/returns.parquet       the same with a boolean outcome, by pyarrow
rows/returns_summed.csv    DuckDB: returns and orders per (store, kind), in
                           the order each pair first appears
rows/store_days.csv        one row per invented store per day: orders,
                           returns and hours open (an exposure)
rows/store_days_summed.csv DuckDB: the sums per store, in first-appearance order
rows/ratings.parquet       one row per rating of 3,000 invented sellers, shuffled,
                           some ids longer than the 20 bytes a group-table slot
                           holds; row groups of 10,000, dictionary pages that fall
                           back to plain ones as pyarrow's do on large files
rows/ratings.csv           the same rows as CSV
rows/ratings_summed.csv    DuckDB: positive ratings and ratings per seller, in
                           first-appearance order

Fixed seed; no real stores. Run from the repository root:
    python3 scripts/make_row_fixtures.py
"""
import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

OUT = "tests/fixtures/rows"
rng = np.random.default_rng(20261203)

# Orders: 300 stores of three kinds with different return rates.
stores = 300
kinds = np.array(["mall", "street", "online"])[np.arange(stores) % 3]
rate = rng.beta(np.array([4.0, 8.0, 12.0])[np.arange(stores) % 3], 60.0)
orders = rng.integers(0, stores, size=12_000) ** 2 // stores  # some stores far busier
returned = rng.random(orders.size) < rate[orders]
forms = [("0", "1"), ("false", "true"), ("FALSE", "TRUE"), ("0.0", "1.0")]
with open(f"{OUT}/returns.csv", "w") as f:
    f.write("store,kind,returned\n")
    for i, (store, back) in enumerate(zip(orders, returned)):
        f.write(f"store-{store:03d},{kinds[store]},{forms[i % 4][int(back)]}\n")
pq.write_table(
    pa.table({
        "store": [f"store-{s:03d}" for s in orders],
        "kind": kinds[orders].tolist(),
        "returned": returned.tolist(),
    }),
    f"{OUT}/returns.parquet",
)
duckdb.sql(f"""
    COPY (
        SELECT store, kind, sum(returned::INTEGER) AS successes, count(*) AS trials
        FROM (SELECT *, row_number() OVER () AS position FROM '{OUT}/returns.parquet')
        GROUP BY store, kind ORDER BY min(position)
    ) TO '{OUT}/returns_summed.csv' (HEADER)
""")

# Store days: 80 stores over 30 days, a few days missing.
with open(f"{OUT}/store_days.csv", "w") as f:
    f.write("store,day,orders,returns,hours_open\n")
    for day in range(30):
        for store in rng.permutation(80):
            if rng.random() < 0.1:
                continue
            n = int(rng.poisson(20 + store))
            k = int(rng.binomial(n, 0.05 + 0.002 * store))
            hours = round(float(rng.uniform(6, 12)), 2)
            f.write(f"shop-{store:02d},{day + 1},{n},{k},{hours}\n")
duckdb.sql(f"""
    COPY (
        SELECT store, sum(orders) AS orders, sum(returns) AS returns, sum(hours_open) AS hours_open
        FROM (SELECT *, row_number() OVER () AS position FROM read_csv('{OUT}/store_days.csv'))
        GROUP BY store ORDER BY min(position)
    ) TO '{OUT}/store_days_summed.csv' (HEADER)
""")

# Ratings: a stream of its own, so the fixtures above stay as they were.
ratings_rng = np.random.default_rng(20261204)
sellers = 3_000
names = np.array([f"seller-{i:04d}" if i % 7 else f"seller-with-a-longer-name-{i:04d}" for i in range(sellers)])
counts = 1 + ratings_rng.poisson(ratings_rng.gamma(1.0, 15.0, sellers))
share = ratings_rng.beta(9.0, 2.0, sellers)
seller_of_row = ratings_rng.permutation(np.repeat(np.arange(sellers), counts))
positive = (ratings_rng.random(seller_of_row.size) < share[seller_of_row]).astype(np.int8)
ratings = pa.table({"seller_id": names[seller_of_row].tolist(), "positive": positive})
pq.write_table(ratings, f"{OUT}/ratings.parquet", row_group_size=10_000, dictionary_pagesize_limit=4096)
ratings.to_pandas().to_csv(f"{OUT}/ratings.csv", index=False)
duckdb.sql(f"""
    COPY (
        SELECT seller_id, sum(positive) AS successes, count(*) AS trials
        FROM read_parquet('{OUT}/ratings.parquet', file_row_number = true)
        GROUP BY seller_id ORDER BY min(file_row_number)
    ) TO '{OUT}/ratings_summed.csv' (HEADER)
""")
print(duckdb.sql(f"SELECT count(*) FROM '{OUT}/returns_summed.csv'").fetchall(),
      duckdb.sql(f"SELECT count(*) FROM '{OUT}/store_days_summed.csv'").fetchall(),
      duckdb.sql(f"SELECT count(*), sum(trials) FROM '{OUT}/ratings_summed.csv'").fetchall())
