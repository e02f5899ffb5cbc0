"""Expected counts by indirect standardisation, computed by the handbook
formula with pandas (not by ratepool), for tests/integration/standardisation.rs:

standardisation/area_bands.csv      one row per invented district and age band:
                                    cases and population (some zero-population
                                    bands with no cases), rows in shuffled order
standardisation/area_bands.parquet  the same rows, by pyarrow
standardisation/national_rates.csv  an invented external standard: a rate per
                                    age band (events per person)
standardisation/expected_internal.csv  per district, in first-appearance order:
                                    observed cases, expected = sum over bands of
                                    population x (all districts' cases in the band /
                                    all districts' population in the band), smr
standardisation/expected_external.csv  the same with the national rates

Fixed seed; no real places. Run from the repository root:
    python3 scripts/make_standardisation_fixtures.py
"""
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

OUT = "tests/fixtures/standardisation"
rng = np.random.default_rng(20261204)
bands = ["0-14", "15-44", "45-64", "65-79", "80+"]
base = np.array([0.0002, 0.0005, 0.002, 0.006, 0.012])
districts = [f"district-{i:02d}" for i in range(40)]
risk = rng.gamma(8.0, 1 / 8.0, len(districts))
rows = []
for d, name in enumerate(districts):
    size = rng.uniform(2_000, 60_000)
    shares = rng.dirichlet([6, 10, 7, 4, 2])
    for b, band in enumerate(bands):
        population = int(round(size * shares[b]))
        if d % 13 == 5 and b == 4:
            population = 0  # a district with nobody in the oldest band
        cases = int(rng.poisson(population * base[b] * risk[d]))
        rows.append((name, band, cases, population))
table = pd.DataFrame(rows, columns=["district", "age_band", "cases", "population"])
table = table.iloc[rng.permutation(len(table))].reset_index(drop=True)
table.to_csv(f"{OUT}/area_bands.csv", index=False)
pq.write_table(pa.Table.from_pandas(table, preserve_index=False), f"{OUT}/area_bands.parquet")

national = pd.DataFrame({"age_band": bands, "rate": [0.00018, 0.00052, 0.0021, 0.0058, 0.0125]})
national.to_csv(f"{OUT}/national_rates.csv", index=False)

def expected(rates: pd.Series) -> pd.DataFrame:
    with_rate = table.assign(expected=table["population"] * table["age_band"].map(rates))
    out = with_rate.groupby("district", sort=False).agg(cases=("cases", "sum"), expected=("expected", "sum"))
    out["smr"] = out["cases"] / out["expected"]
    return out.reset_index()

pooled = table.groupby("age_band")["cases"].sum() / table.groupby("age_band")["population"].sum()
expected(pooled).to_csv(f"{OUT}/expected_internal.csv", index=False, float_format="%.17g")
expected(national.set_index("age_band")["rate"]).to_csv(f"{OUT}/expected_external.csv", index=False, float_format="%.17g")
print(len(table), "rows;", "pooled rates:", dict(pooled.round(6)))
