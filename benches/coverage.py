"""Coverage of nominal 95% intervals, plug-in against corrected
(`--intervals corrected`: each group's posterior mixed over a 7 x 7
Gauss-Hermite rule on the fitted prior's sampling distribution, centred on
the fit less its parametric-bootstrap median bias; the posterior that Kass
and Steffey approximate to first order, taken here by quadrature).

Data sets are drawn from a known prior, Beta(2, 18) (mean 0.1), with group
sizes drawn from 1, 2, 3, 5, 8, 13, 30 and 100 trials (half the groups below
10), in cells of 20, 50, 200 and 1,000 groups per data set, 1,000 data sets
per cell (fixed seed 20261204). Every data set is fitted on its own: all the
data sets of a cell go through one ratepool run with `--by dataset`
(each segment is fitted exactly as alone, `--min-groups 1`). A data set
whose own fit fails (only the mean identifiable, no pooling) falls back to
the all-groups prior; those are left out and counted. Coverage is the share
of true rates inside their interval: the empirical-Bayes coverage,
averaged over the prior.

With MODEL=gamma-poisson the data sets are drawn from Gamma(shape 4, rate 4)
(relative risks around 1) with exposures (expected counts) drawn from 0.2,
0.5, 1, 2, 5, 10 and 30 (three in seven below 2, the small ones).
With MODEL=normal-normal (or normal-normal-reml, the restricted likelihood)
the data sets are drawn from N(0, 1) with standard errors drawn from 0.25,
0.5, 1, 2 and 4 (three in five at 1 or more, the noisy groups that stand in
for the small ones), the same cells and seed.

usage: [MODEL=...] python3 benches/coverage.py [path/to/ratepool] > benches/results/coverage.txt
"""
import csv
import os
import subprocess
import sys
import tempfile

import numpy as np

RATEPOOL = sys.argv[1] if len(sys.argv) > 1 else "target/release/ratepool"
SIZES = np.array([1, 2, 3, 5, 8, 13, 30, 100])
CELLS = [20, 50, 200, 1000]
DATA_SETS = 1000
MODEL = os.environ.get("MODEL", "beta-binomial")
NORMAL = MODEL.startswith("normal-normal")
GAMMA = MODEL == "gamma-poisson"
EXPOSURES = np.array([0.2, 0.5, 1.0, 2.0, 5.0, 10.0, 30.0])
SES = np.array([0.25, 0.5, 1.0, 2.0, 4.0])
rng = np.random.default_rng(20261204)


def run(path, out, intervals):
    if NORMAL:
        model = ["--model", "normal-normal", "--estimate", "k", "--std-error", "n"]
        if MODEL.endswith("reml"):
            model += ["--variance-method", "reml"]
    elif GAMMA:
        model = ["--model", "gamma-poisson", "--events", "k", "--exposure", "n"]
    else:
        model = ["--model", "beta-binomial", "--successes", "k", "--trials", "n"]
    subprocess.run([RATEPOOL, "--quiet", "fit", *model, "--input", path, "--group", "id",
                    "--by", "dataset", "--min-groups", "1",
                    "--intervals", intervals, "--output", out], check=True, stderr=subprocess.DEVNULL)
    rows = {}
    with open(out) as f:
        for r in csv.DictReader(f):
            rows[r["id"]] = (float(r["interval_lo"]), float(r["interval_hi"]), r["prior_fallback"] == "true",
                             float(r["pool_weight"]) == 1.0)
    return rows


if GAMMA:
    print(f"gamma-poisson: prior Gamma(4, rate 4); exposures {[float(x) for x in EXPOSURES]}; {DATA_SETS} data sets per cell; seed 20261204")
    print(f"{'groups':>7} {'kept':>5}  {'plug-in E<2':>11} {'corrected E<2':>13}  {'plug-in all':>11} {'corrected all':>13}"
          f"  {'pooled':>7}  {'interior: plug-in':>10} {'corrected':>12}")
elif NORMAL:
    print(f"{MODEL}: prior N(0, 1); standard errors {[float(x) for x in SES]}; {DATA_SETS} data sets per cell; seed 20261204")
    print(f"{'groups':>7} {'kept':>5}  {'plug-in se>=1':>11} {'corrected se>=1':>13}  {'plug-in all':>11} {'corrected all':>13}"
          f"  {'pooled':>7}  {'interior: plug-in':>10} {'corrected':>12}")
else:
    print(f"prior Beta(2, 18); sizes {[int(x) for x in SIZES]}; {DATA_SETS} data sets per cell; seed 20261204")
    print(f"{'groups':>7} {'kept':>5}  {'plug-in <10':>11} {'corrected <10':>13}  {'plug-in all':>11} {'corrected all':>13}"
      f"  {'pooled':>7}  {'interior: plug-in':>10} {'corrected':>12}")
with tempfile.TemporaryDirectory() as tmp:
    for groups in CELLS:
        path = os.path.join(tmp, f"cell-{groups}.csv")
        truth = {}
        with open(path, "w") as f:
            f.write("id,dataset,k,n\n")
            for d in range(DATA_SETS):
                if GAMMA:
                    theta = rng.gamma(4.0, 1.0 / 4.0, size=groups)
                    n = rng.choice(EXPOSURES, size=groups)
                    k = rng.poisson(theta * n)
                    # "Small" below means an exposure under 2.
                    small = 5.0 * n
                elif NORMAL:
                    theta = rng.normal(0.0, 1.0, size=groups)
                    n = rng.choice(SES, size=groups)
                    k = rng.normal(theta, n)
                    # "Small" below means noisy: a standard error of 1 or more.
                    small = 9.99 / n
                else:
                    theta = rng.beta(2.0, 18.0, size=groups)
                    n = rng.choice(SIZES, size=groups)
                    k = rng.binomial(n, theta)
                    small = n
                for i in range(groups):
                    gid = f"d{d}g{i}"
                    truth[gid] = (theta[i], small[i], d)
                    f.write(f"{gid},d{d},{k[i]},{n[i]}\n")
        plug = run(path, os.path.join(tmp, "plug.csv"), "plug-in")
        corrected = run(path, os.path.join(tmp, "corrected.csv"), "corrected")
        fell_back = {truth[g][2] for g, row in plug.items() if row[2]}
        pooled = {truth[g][2] for g, row in plug.items() if row[3]}
        interior = {"plug": [0, 0], "corrected": [0, 0]}
        hits = {"plug": [0, 0, 0, 0], "corrected": [0, 0, 0, 0]}  # small hits, small n, all hits, all n
        for gid, (theta, n, d) in truth.items():
            if d in fell_back:
                continue
            for name, rows in [("plug", plug), ("corrected", corrected)]:
                lo, hi = rows[gid][:2]
                inside = lo <= theta <= hi
                if d not in pooled:
                    interior[name][0] += inside
                    interior[name][1] += 1
                if n < 10:
                    hits[name][0] += inside
                    hits[name][1] += 1
                hits[name][2] += inside
                hits[name][3] += 1
        share = lambda h, i: 100.0 * h[i] / h[i + 1]
        print(f"{groups:>7} {DATA_SETS - len(fell_back):>5}  {share(hits['plug'], 0):>10.2f}% "
              f"{share(hits['corrected'], 0):>12.2f}%  {share(hits['plug'], 2):>10.2f}% "
              f"{share(hits['corrected'], 2):>12.2f}%  {len(pooled):>7}  "
              f"{share(interior['plug'], 0):>10.2f}% {share(interior['corrected'], 0):>12.2f}%", flush=True)
