"""Aggregates the fit fixtures into pair tables with DuckDB, as a warehouse would.

The test `tests/integration/scale.rs` fits the prior from these pair tables and
checks it equals the prior fitted from the raw rows (the two fit fixtures and
the demo marketplace). DuckDB is a general-purpose
SQL engine from PyPI (`pip install duckdb`); the SQL is the README's recipe.

Run from the repository root: python3 scripts/make_pair_tables.py
"""
import duckdb

FIXTURES = "tests/fixtures"

QUERIES = {
    "beta_binomial_pairs.csv": f"""
        SELECT tries AS trials, hits AS successes, count(*) AS groups
        FROM read_csv('{FIXTURES}/beta_binomial_groups.csv', header = true)
        GROUP BY tries, hits
        ORDER BY random()""",
    "marketplace_pairs.csv": """
        SELECT total_ratings, positive_ratings, count(*) AS sellers
        FROM read_csv('demo-data/marketplace.csv', header = true)
        GROUP BY ALL
        ORDER BY random()""",
    "gamma_poisson_pairs.csv": f"""
        SELECT expected AS exposure, cases AS events, count(*) AS groups
        FROM read_csv('{FIXTURES}/gamma_poisson_areas.csv', header = true,
                      columns = {{'area': 'VARCHAR', 'cases': 'BIGINT', 'expected': 'DOUBLE'}})
        GROUP BY expected, cases
        ORDER BY random()""",
}

con = duckdb.connect()
con.execute("SELECT setseed(0.20261202)")
for name, query in QUERIES.items():
    con.execute(f"COPY ({query}) TO '{FIXTURES}/{name}' (HEADER, DELIMITER ',')")
    rows = con.execute(f"SELECT count(*), sum(#3) FROM read_csv('{FIXTURES}/{name}')").fetchone()
    print(f"{name}: {rows[0]} pairs, {rows[1]} groups (duckdb {duckdb.__version__})")
