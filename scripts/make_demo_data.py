"""Writes the two invented demo scenarios in demo-data/ (fixed seed).

Run: python3 scripts/make_demo_data.py   (needs numpy)

marketplace.csv  about 20,000 invented sellers: positive and total ratings.
                 Totals are heavy-tailed (most sellers have a handful, a few
                 have thousands); true positive shares ~ Beta(18, 2).
districts.csv    about 3,000 invented districts: observed cases and expected
                 counts (indirect standardisation); true relative risks
                 ~ Gamma(shape 6, rate 6), so the SMR is centred on 1.
No real people, sellers, brands or places are represented.
"""

import pathlib

import numpy as np

SEED = 20261201
OUT = pathlib.Path(__file__).resolve().parent.parent / "demo-data"


def marketplace(rng):
    sellers = 20_000
    totals = np.floor(rng.lognormal(mean=1.3, sigma=1.7, size=sellers)).astype(np.int64)
    totals = np.minimum(totals, 50_000)
    share = rng.beta(18.0, 2.0, size=sellers)
    positive = rng.binomial(totals, share)
    ids = [f"seller-{i:05d}" for i in range(1, sellers + 1)]
    lines = ["seller_id,positive_ratings,total_ratings"]
    lines += [f"{s},{k},{n}" for s, k, n in zip(ids, positive, totals)]
    (OUT / "marketplace.csv").write_text("\n".join(lines) + "\n")


def districts(rng):
    count = 3_000
    expected = rng.lognormal(mean=1.0, sigma=1.2, size=count)
    risk = rng.gamma(shape=6.0, scale=1.0 / 6.0, size=count)
    observed = rng.poisson(expected * risk)
    lines = ["district_id,observed_cases,expected_cases"]
    lines += [f"district-{i:04d},{y},{e:.4f}" for i, (y, e) in enumerate(zip(observed, expected), start=1)]
    (OUT / "districts.csv").write_text("\n".join(lines) + "\n")


def main():
    OUT.mkdir(exist_ok=True)
    rng = np.random.default_rng(SEED)
    marketplace(rng)
    districts(rng)


if __name__ == "__main__":
    main()
