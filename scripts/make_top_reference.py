"""The exact probability of being among the K highest rates for the first
2,000 demo sellers (K = 5, the case the README's prob_top accuracy figures
name), outside ratepool, for tests/integration/decisions.rs.

Also all 20,000 demo sellers with K = 20 (the README's other case), under
the prior fitted to them (prior-all.json), on a grid of 2,000 points, the
forward states kept every 100 sellers and recomputed, so memory stays small.

The prior is the one ratepool fits to these sellers, saved once by this
script in tests/fixtures/top_exact/prior.json; from it alone, each seller's
posterior is Beta(alpha + k, beta + n - k) (conjugacy; scipy.stats.beta), and

    P(seller i among the K highest) = integral of f_i(x) P(at most K - 1 of
    the other sellers exceed x) dx,

with the count of the others above x by the exact Poisson-binomial recursion
(forward over the sellers before i and backward over those after, combined,
so nothing is divided out), on a common grid of 6,000 points uniform in
logit(x) from logit(0.5) to logit(1 - 1e-9), the integral by the trapezoid
rule in that variable. Halving the grid moved no value by more than 6e-16
when the fixture was made, and the probabilities summed to K within 3e-12
(both printed below). The mass below x = 0.5, where no seller with a chance
of the top five has any, is left out.

Run from the repository root (two to three minutes, 2.5 GB of memory):
    python3 scripts/make_top_reference.py [path/to/ratepool]
"""
import csv
import json
import subprocess
import sys

import numpy as np
from scipy import stats
from scipy.special import expit

RATEPOOL = sys.argv[1] if len(sys.argv) > 1 else "target/release/ratepool"
OUT = "tests/fixtures/top_exact"
K = 5
SELLERS = 2000

rows = list(csv.DictReader(open("demo-data/marketplace.csv")))
with open(f"{OUT}/sellers.csv", "w") as f:
    f.write("seller_id,positive_ratings,total_ratings\n")
    for r in rows[:SELLERS]:
        f.write(f"{r['seller_id']},{r['positive_ratings']},{r['total_ratings']}\n")
k = np.array([float(r["positive_ratings"]) for r in rows])
n = np.array([float(r["total_ratings"]) for r in rows])


def fitted_prior(input_path, summary_path):
    """The prior ratepool fits to these sellers, saved for the test to score with."""
    subprocess.run([RATEPOOL, "--quiet", "fit", "--model", "beta-binomial", "--input", input_path,
                    "--group", "seller_id", "--successes", "positive_ratings", "--trials", "total_ratings",
                    "--output", "/tmp/top-exact.csv", "--summary", summary_path], check=True)
    prior = json.load(open(summary_path))["prior"]
    return prior["alpha"], prior["beta"]


def exact(prior, k, n, K, points, block=100):
    """P(each seller among the K highest) on a grid of `points` in logit x."""
    sellers = len(k)
    t = np.linspace(0.0, np.log((1 - 1e-9) / 1e-9), points)
    x = expit(t)
    dxdt = x * (1 - x)
    a, b = prior[0] + k, prior[1] + n - k

    def above(i):
        return stats.beta.sf(x, a[i], b[i])

    def step(state, p):
        # One more seller, who exceeds x with probability p: the count's distribution, truncated at K - 1.
        nxt = state * (1 - p)[:, None]
        nxt[:, 1:] += state[:, :-1] * p[:, None]
        return nxt

    # Forward states (how many of the sellers before i exceed x) kept every `block` sellers.
    start = np.zeros((points, K))
    start[:, 0] = 1.0
    checkpoints, state = [], start.copy()
    for i in range(sellers):
        if i % block == 0:
            checkpoints.append(state)
        state = step(state, above(i))
    probabilities = np.zeros(sellers)
    backward = start.copy()  # how many of the sellers after i exceed x
    for first in range(((sellers - 1) // block) * block, -1, -block):
        states, state = [], checkpoints[first // block]
        for i in range(first, min(first + block, sellers)):
            states.append(state)
            state = step(state, above(i))
        for i in range(min(first + block, sellers) - 1, first - 1, -1):
            p = above(i)
            cumulative = np.cumsum(backward, axis=1)
            # P(at most K - 1 others above x) = sum over m + j <= K - 1 of forward[m] backward[j].
            at_most = sum(states[i - first][:, m] * cumulative[:, K - 1 - m] for m in range(K))
            density = stats.beta.pdf(x, a[i], b[i]) * dxdt
            probabilities[i] = np.trapezoid(density * at_most, t)
            backward = step(backward, p)
    return probabilities


def case(prior, sellers, K, points):
    fine = exact(prior, k[:sellers], n[:sellers], K, points)
    coarse = exact(prior, k[:sellers], n[:sellers], K, points // 2)
    print(f"{sellers} sellers, K = {K}: largest change from halving the grid {np.abs(fine - coarse).max():.1e}, "
          f"sum {fine.sum():.12f}", flush=True)
    return fine


small = case(fitted_prior(f"{OUT}/sellers.csv", f"{OUT}/prior.json"), SELLERS, K, 6000)
large = case(fitted_prior("demo-data/marketplace.csv", f"{OUT}/prior-all.json"), len(k), 20, 2000)
json.dump({"source": "scripts/make_top_reference.py (scipy.stats.beta, Poisson-binomial recursion, trapezoid in logit x)",
           "k": K, "prob_top": small.tolist(), "all_sellers": {"k": 20, "prob_top": large.tolist()}},
          open(f"{OUT}/exact.json", "w"), indent=0)
