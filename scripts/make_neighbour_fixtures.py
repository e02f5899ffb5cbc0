"""Fixtures for the neighbour prior (Marshall's local empirical Bayes), from
open data a registry package ships: the North Carolina SIDS counties of
libpysal's `sids2` example (Cressie 1993, Statistics for Spatial Data,
pp. 386-389): 100 counties with their 1974 births (BIR74) and sudden infant
deaths (SID74), and the queen contiguity of the counties in its GAL file.

Writes into tests/fixtures/neighbours/:
- nc_sids.csv: county (FIPS number), name, births, deaths, and the expected
  deaths under the internal standard (births times the pooled rate);
- nc_sids_neighbours.csv: each pair of neighbouring counties once (the GAL
  file lists each pair from both sides);
- marshall.json: per county, the local mean m, the local variance v (floored
  at 0), the shrinkage factor C and the posterior mean m + C (O/E - m), by
  numpy from the formulas of Marshall (1991, Applied Statistics 40: 283-294)
  as the issue states them, with each county's neighbourhood the county and
  its neighbours;
- nc_counties.geojson: the county polygons of the example's shapefile (read
  by geopandas), each with its `county` (FIPS number) and `name`;
- contiguity.json: the pairs of counties whose polygons share at least one
  point (queen) and at least a stretch of boundary (rook), by shapely
  (`intersects`, and an intersection of positive length). The rook pairs are
  the GAL file's, which the script checks.

usage: python3 scripts/make_neighbour_fixtures.py   (needs libpysal, numpy, geopandas)
"""
import csv
import json
from pathlib import Path

import libpysal
import numpy as np
from libpysal import examples

OUT = Path(__file__).resolve().parents[1] / "tests" / "fixtures" / "neighbours"


def main() -> None:
    table = libpysal.io.open(examples.get_path("sids2.dbf"))
    header = table.header
    rows = [dict(zip(header, row)) for row in table]
    fips = [int(r["FIPSNO"]) for r in rows]
    names = [r["NAME"] for r in rows]
    births = np.array([r["BIR74"] for r in rows], dtype=float)
    deaths = np.array([r["SID74"] for r in rows], dtype=float)
    expected = births * deaths.sum() / births.sum()

    gal = libpysal.io.open(examples.get_path("sids2.gal")).read()
    neighbours = {int(k): sorted(int(n) for n in v) for k, v in gal.neighbors.items()}
    assert set(neighbours) == set(fips)
    for area, around in neighbours.items():
        for other in around:
            assert area in neighbours[other], "the GAL file is symmetric"
    pairs = sorted({(min(a, b), max(a, b)) for a, around in neighbours.items() for b in around})

    place = {f: i for i, f in enumerate(fips)}
    local_mean, local_variance, factor, posterior = [], [], [], []
    for i, area in enumerate(fips):
        s = [i] + [place[n] for n in neighbours[area]]
        o, e = deaths[s], expected[s]
        m = o.sum() / e.sum()
        v = (e * (o / e - m) ** 2).sum() / e.sum() - m / e.mean()
        v = max(v, 0.0)
        c = v / (v + m / expected[i])
        local_mean.append(m)
        local_variance.append(v)
        factor.append(c)
        posterior.append(m + c * (deaths[i] / expected[i] - m))

    OUT.mkdir(parents=True, exist_ok=True)
    with open(OUT / "nc_sids.csv", "w", newline="") as f:
        out = csv.writer(f)
        out.writerow(["county", "name", "births", "deaths", "expected"])
        for i in range(len(fips)):
            out.writerow([fips[i], names[i], int(births[i]), int(deaths[i]), repr(float(expected[i]))])
    with open(OUT / "nc_sids_neighbours.csv", "w", newline="") as f:
        out = csv.writer(f)
        out.writerow(["county", "neighbour"])
        out.writerows(pairs)
    reference = {
        "source": "libpysal examples sids2 (Cressie 1993); numpy, Marshall (1991) as stated in the issue",
        "county": fips,
        "neighbours": [len(neighbours[f]) for f in fips],
        "local_mean": local_mean,
        "local_variance": local_variance,
        "shrinkage": factor,
        "posterior_mean": posterior,
    }
    with open(OUT / "marshall.json", "w") as f:
        json.dump(reference, f, indent=1)
    write_map(pairs)
    print(f"{len(fips)} counties, {len(pairs)} pairs, {sum(v == 0 for v in local_variance)} with v = 0")


def write_map(gal_pairs) -> None:
    import geopandas as gpd

    counties = gpd.read_file(examples.get_path("sids2.shp"))
    counties["county"] = counties["FIPSNO"].astype(int)
    counties["name"] = counties["NAME"]
    counties = counties[["county", "name", "geometry"]]
    with open(OUT / "nc_counties.geojson", "w") as f:
        f.write(counties.to_json())
    ids, shapes = list(counties["county"]), list(counties.geometry)
    queen, rook = set(), set()
    for i in range(len(shapes)):
        for j in range(i + 1, len(shapes)):
            if shapes[i].intersects(shapes[j]):
                pair = (min(ids[i], ids[j]), max(ids[i], ids[j]))
                queen.add(pair)
                if shapes[i].intersection(shapes[j]).length > 0:
                    rook.add(pair)
    assert rook == set(gal_pairs), "the GAL file holds the rook pairs"
    with open(OUT / "contiguity.json", "w") as f:
        json.dump({"source": "shapely on the sids2 shapefile's polygons", "queen": sorted(queen),
                   "rook": sorted(rook)}, f)
    print(f"queen {len(queen)} pairs, rook {len(rook)}")


if __name__ == "__main__":
    main()
