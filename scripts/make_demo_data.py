"""Writes the invented demo scenarios in demo-data/ (fixed seed).

Run: python3 scripts/make_demo_data.py   (needs numpy)

marketplace.csv  about 20,000 invented sellers: positive and total ratings.
                 Totals are heavy-tailed (most sellers have a handful, a few
                 have thousands); true positive shares ~ Beta(18, 2).
districts.csv    about 3,000 invented districts: observed cases and expected
                 counts (indirect standardisation); true relative risks
                 ~ Gamma(shape 6, rate 6), so the SMR is centred on 1.
returns.csv      about 40,000 invented orders, one row per order: the store,
                 the kind of store (four kinds, each with its own spread of
                 return rates) and whether the order came back (0/1). Drawn
                 from a stream of its own (seed 20261202), so adding it left
                 the two files above unchanged.
district_quarters.csv  the districts' cases and expected counts split over
                 four quarters (seed 20261203), one row per district per
                 quarter, for summing back per district (--aggregate).
clinic_waits.csv  600 invented clinics' mean waiting times in minutes with
                 their standard errors (seed 20261204): true means
                 ~ Normal(24, 5^2); each clinic's mean is over its patients
                 (3 to about 2,000, heavy-tailed), whose waits vary with
                 sd 12, so the standard error is the sample sd over root n.
sellers.csv      8,000 invented sellers with their tenure in months and their
                 category (seed 20261205): a seller's true positive share
                 follows its tenure and category, logit(p) = 0.9
                 + 0.45 ln(tenure) + a category effect, times a spread of
                 strength 40 around it; new sellers get fewer good ratings.
district_profiles.csv  3,000 invented districts with a deprivation score
                 (mean 0, sd 1) and the share of outdoor workers (seed
                 20261206): relative risk exp(0.3 deprivation + 1.2 outdoor
                 share - 0.3) times Gamma(shape 10, rate 10).
district_bands.csv  400 invented districts by five age bands (seed 20261207):
                 cases and population, one row per district and band. Band
                 rates rise with age; the districts' relative risks are
                 Gamma(shape 20, rate 20) around 1, except a hidden hot spot of
                 twelve districts (district-0101 to district-0112) at 1.6 times.
storefronts.csv  3,000 invented storefronts' visits and purchases (seed
                 20261208): two kinds of storefront the table does not name.
                 Most (70%) convert visits at about 6% (Beta(30, 470)); the
                 rest were opened in bulk by one importer and convert at about
                 1% (Beta(10, 990)). Visits are heavy-tailed, 5 to a few
                 thousand. One Beta prior cannot hold both humps.
star_sellers.csv  2,000 invented sellers' star ratings, one count column per
                 star (seed 20261209): each seller's shares of 1 to 5 stars
                 from Dirichlet(0.5, 0.3, 0.6, 2.0, 6.6) (mean score 4.35),
                 ratings per seller lognormal (median 12, from 0 to a few
                 hundred); seller-0007 has three five-star ratings and
                 seller-0042 has 800 ratings averaging 4.72.
star_shops.csv   1,215 invented shops' star ratings in four categories (seed
                 20261211), one count column per star and a `category`
                 column: prints (400 shops, shares from Dirichlet(0.2, 0.2,
                 0.4, 1.6, 7.6), mean score 4.62), repairs (400,
                 Dirichlet(1.6, 0.6, 0.8, 2.0, 3.0), mean score 3.52), food
                 (400, Dirichlet(0.5, 0.4, 0.8, 3.0, 4.3), mean score 4.17)
                 and gadgets (15 shops, too few for a prior of their own, from
                 the food law); ratings per shop lognormal (median 15).
                 shop-0003 (repairs) and shop-0401 (prints) each have ten
                 ratings averaging 4.6.
district_map.geojson  the map of the 400 districts of district_bands.csv: an
                 invented region of 20 x 20 hexagons (4 km from centre to
                 corner, coordinates in km, no randomness), each a Polygon
                 keyed by `district_id`. The hidden hot spot's twelve
                 districts (district-0101 to district-0112) are the twelve
                 cells nearest the cell in column 13 of row 7, so they lie
                 together; the other districts fill the remaining cells in
                 row order. Neighbouring hexagons share their corners exactly.
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


def returns():
    rng = np.random.default_rng(20261202)
    kinds = ["arcade", "kiosk", "warehouse", "web"]
    # Return rates by kind: Beta(mean * 40, (1 - mean) * 40) around each mean.
    means = {"arcade": 0.06, "kiosk": 0.04, "warehouse": 0.09, "web": 0.16}
    stores = 400
    kind_of = [kinds[i % 4] for i in range(stores)]
    rate = np.array([rng.beta(means[k] * 40, (1 - means[k]) * 40) for k in kind_of])
    # Busy and quiet stores: orders per store heavy-tailed, at least one.
    weight = rng.lognormal(0.0, 1.3, size=stores)
    orders = rng.choice(stores, size=40_000, p=weight / weight.sum())
    returned = rng.random(orders.size) < rate[orders]
    lines = ["store_id,store_kind,returned"]
    lines += [f"store-{s:03d},{kind_of[s]},{int(r)}" for s, r in zip(orders, returned)]
    (OUT / "returns.csv").write_text("\n".join(lines) + "\n")


def district_quarters():
    rng = np.random.default_rng(20261203)
    rows = [line.split(",") for line in (OUT / "districts.csv").read_text().splitlines()[1:]]
    lines = ["district_id,quarter,observed_cases,expected_cases"]
    for district, observed, expected in rows:
        share = rng.dirichlet([5.0] * 4)
        cases = rng.multinomial(int(observed), share)
        # Expected counts in whole ten-thousandths, so the quarters sum back exactly.
        units = rng.multinomial(round(float(expected) * 10_000), share)
        for quarter in range(4):
            lines.append(f"{district},{quarter + 1},{cases[quarter]},{units[quarter] / 10_000:.4f}")
    (OUT / "district_quarters.csv").write_text("\n".join(lines) + "\n")


def clinic_waits():
    rng = np.random.default_rng(20261204)
    clinics = 600
    truth = rng.normal(24.0, 5.0, size=clinics)
    patients = np.minimum(3 + np.floor(rng.lognormal(3.0, 1.4, size=clinics)), 2000).astype(int)
    lines = ["clinic_id,zone,patients,mean_wait_minutes,wait_se"]
    for i in range(clinics):
        n = patients[i]
        waits = rng.normal(truth[i], 12.0, size=n)
        se = waits.std(ddof=1) / np.sqrt(n)
        lines.append(f"clinic-{i:03d},zone-{'abcd'[i % 4]},{n},{waits.mean():.2f},{se:.3f}")
    (OUT / "clinic_waits.csv").write_text("\n".join(lines) + "\n")


def sellers():
    rng = np.random.default_rng(20261205)
    count = 8_000
    categories = np.array(["books", "games", "garden", "kitchen", "tools"])
    effect = {"books": 0.0, "games": -0.4, "garden": 0.2, "kitchen": -0.1, "tools": 0.3}
    kind = categories[rng.integers(0, len(categories), size=count)]
    tenure = np.maximum(1, np.round(rng.lognormal(2.5, 1.0, size=count))).astype(int)
    centre = 1.0 / (1.0 + np.exp(-(0.9 + 0.45 * np.log(tenure) + np.array([effect[k] for k in kind]))))
    share = rng.beta(centre * 40.0, (1.0 - centre) * 40.0)
    totals = np.minimum(np.floor(rng.lognormal(1.5, 1.5, size=count)).astype(np.int64) + 1, 20_000)
    positive = rng.binomial(totals, share)
    lines = ["seller_id,category,tenure_months,positive_ratings,total_ratings"]
    lines += [
        f"seller-{i:05d},{c},{t},{k},{n}"
        for i, (c, t, k, n) in enumerate(zip(kind, tenure, positive, totals), start=1)
    ]
    (OUT / "sellers.csv").write_text("\n".join(lines) + "\n")


def district_profiles():
    rng = np.random.default_rng(20261206)
    count = 3_000
    deprivation = rng.normal(0.0, 1.0, size=count)
    outdoor = rng.uniform(0.02, 0.45, size=count)
    expected = rng.lognormal(mean=1.2, sigma=1.1, size=count)
    risk = np.exp(0.3 * deprivation + 1.2 * outdoor - 0.3) * rng.gamma(10.0, 1.0 / 10.0, size=count)
    observed = rng.poisson(expected * risk)
    lines = ["district_id,deprivation,outdoor_share,observed_cases,expected_cases"]
    lines += [
        f"district-{i:04d},{d:.3f},{o:.3f},{y},{e:.4f}"
        for i, (d, o, y, e) in enumerate(zip(deprivation, outdoor, observed, expected), start=1)
    ]
    (OUT / "district_profiles.csv").write_text("\n".join(lines) + "\n")


def district_bands():
    rng = np.random.default_rng(20261207)
    count = 400
    bands = ["0-14", "15-44", "45-64", "65-79", "80+"]
    rates = np.array([0.0001, 0.0004, 0.0018, 0.0055, 0.011])
    people = rng.lognormal(np.log(12_000.0), 0.8, size=count)
    shares = rng.dirichlet([6.0, 10.0, 7.0, 4.0, 2.0], size=count)
    risk = rng.gamma(20.0, 1.0 / 20.0, size=count)
    risk[100:112] *= 1.6
    lines = ["district_id,age_band,cases,population"]
    for i in range(count):
        population = np.round(people[i] * shares[i]).astype(int)
        cases = rng.poisson(population * rates * risk[i])
        lines += [f"district-{i + 1:04d},{b},{c},{p}" for b, c, p in zip(bands, cases, population)]
    (OUT / "district_bands.csv").write_text("\n".join(lines) + "\n")
    # The hidden truth the cases were drawn from, known only because the data are
    # invented: the README's reading of the neighbour prior is checked against it.
    truth = ["district_id,true_risk"] + [f"district-{i + 1:04d},{risk[i]:.6f}" for i in range(count)]
    (OUT / "district_truth.csv").write_text("\n".join(truth) + "\n")


def district_map():
    import json

    columns, rows, radius = 20, 20, 4.0
    # Pointy-top hexagons on an integer lattice (odd rows shifted half a cell):
    # a cell's centre is (2 col + row % 2, 3 row) and its corners are the
    # lattice points around it, so neighbours compute the same corners exactly.
    corners = [(0, 2), (1, 1), (1, -1), (0, -2), (-1, -1), (-1, 1)]
    unit_x, unit_y = radius * np.sqrt(3.0) / 2.0, radius / 2.0
    cells = [(col, row) for row in range(rows) for col in range(columns)]

    def cube(col, row):
        x = col - (row - (row & 1)) // 2
        return x, row, -x - row

    def distance(a, b):
        return max(abs(u - v) for u, v in zip(cube(*a), cube(*b)))

    centre = (13, 7)
    hot = sorted(cells, key=lambda c: (distance(c, centre), c[1], c[0]))[:12]
    others = iter(c for c in cells if c not in hot)
    ids = {}
    for number in range(1, columns * rows + 1):
        ids[hot[number - 101] if 101 <= number <= 112 else next(others)] = f"district-{number:04d}"
    features = []
    for (col, row), district in sorted(ids.items(), key=lambda item: item[1]):
        cx, cy = 2 * col + (row & 1), 3 * row
        ring = [[round((cx + dx) * unit_x, 4), round((cy + dy) * unit_y, 4)] for dx, dy in corners]
        ring.append(ring[0])
        features.append({"type": "Feature", "properties": {"district_id": district},
                         "geometry": {"type": "Polygon", "coordinates": [ring]}})
    text = json.dumps({"type": "FeatureCollection", "features": features}, separators=(",", ":"))
    (OUT / "district_map.geojson").write_text(text + "\n")


def storefronts():
    rng = np.random.default_rng(20261208)
    count = 3_000
    bulk = rng.random(count) < 0.3
    rate = np.where(bulk, rng.beta(10.0, 990.0, count), rng.beta(30.0, 470.0, count))
    visits = 5 + np.floor(rng.lognormal(mean=4.5, sigma=1.0, size=count)).astype(np.int64)
    purchases = rng.binomial(visits, rate)
    lines = ["storefront_id,purchases,visits"]
    lines += [f"store-{i:04d},{k},{n}" for i, (k, n) in enumerate(zip(purchases, visits), start=1)]
    (OUT / "storefronts.csv").write_text("\n".join(lines) + "\n")


def star_sellers():
    rng = np.random.default_rng(20261209)
    count = 2_000
    shares = rng.dirichlet([0.5, 0.3, 0.6, 2.0, 6.6], size=count)
    ratings = np.floor(rng.lognormal(mean=2.5, sigma=1.4, size=count)).astype(np.int64)
    stars = np.array([rng.multinomial(n, p) for n, p in zip(ratings, shares)])
    # The README's two sellers: three five-star ratings, and 800 ratings averaging 4.72.
    stars[6] = [0, 0, 0, 0, 3]
    stars[41] = [16, 8, 24, 88, 664]
    lines = ["seller_id,stars_1,stars_2,stars_3,stars_4,stars_5"]
    lines += [f"seller-{i:04d}," + ",".join(str(c) for c in row) for i, row in enumerate(stars, start=1)]
    (OUT / "star_sellers.csv").write_text("\n".join(lines) + "\n")


def star_shops():
    rng = np.random.default_rng(20261211)
    laws = [
        ("repairs", [1.6, 0.6, 0.8, 2.0, 3.0], 400),
        ("prints", [0.2, 0.2, 0.4, 1.6, 7.6], 400),
        ("food", [0.5, 0.4, 0.8, 3.0, 4.3], 400),
        ("gadgets", [0.5, 0.4, 0.8, 3.0, 4.3], 15),
    ]
    rows = []
    for category, shapes, count in laws:
        shares = rng.dirichlet(shapes, size=count)
        ratings = np.floor(rng.lognormal(mean=np.log(15.0), sigma=1.0, size=count)).astype(np.int64)
        rows += [(category, rng.multinomial(n, p)) for n, p in zip(ratings, shares)]
    # The README's two shops: ten ratings averaging 4.6, one in repairs and one in prints.
    rows[2] = ("repairs", np.array([0, 0, 1, 2, 7]))
    rows[400] = ("prints", np.array([0, 0, 1, 2, 7]))
    lines = ["shop_id,category,stars_1,stars_2,stars_3,stars_4,stars_5"]
    lines += [f"shop-{i:04d},{c}," + ",".join(str(n) for n in row) for i, (c, row) in enumerate(rows, start=1)]
    (OUT / "star_shops.csv").write_text("\n".join(lines) + "\n")


def main():
    OUT.mkdir(exist_ok=True)
    rng = np.random.default_rng(SEED)
    marketplace(rng)
    districts(rng)
    returns()
    district_quarters()
    clinic_waits()
    sellers()
    district_profiles()
    district_bands()
    district_map()
    storefronts()
    star_sellers()
    star_shops()


if __name__ == "__main__":
    main()
