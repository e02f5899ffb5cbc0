"""Reference flags under the posterior false-discovery rate, computed outside
ratepool: posterior tail probabilities from scipy.stats (beta.cdf / beta.sf,
gamma.cdf / gamma.sf) at a fixed prior, and the direct posterior probability
rule of Newton, Noueiry, Sarkar and Ahlquist (Biostatistics 5(2), 2004)
written here in numpy: groups in decreasing posterior probability of the
event, the largest prefix whose mean probability of no event is at most Q,
equal probabilities taken together; a group's q-value is the smallest such
mean over the prefixes that hold it.

`tests/integration/decisions.rs` scores the groups with the same prior
(`score --prior`) and compares `flagged` exactly and `flag_fdr` within 1e-12
absolute. The script keeps every bound Q at least 1e-6 away from every
prefix mean, so a last-digit difference in a probability cannot move a flag.

Groups are invented (fixed seed). Run from the repository root:
    python3 scripts/make_flag_fixtures.py
"""
import json

import numpy as np
from scipy import stats

rng = np.random.default_rng(20261202)


def flags(no_event, bound):
    """(flagged, q-values) by the rule, one group per entry."""
    order = np.argsort(no_event, kind="stable")
    sorted_miss = no_event[order]
    # Tie ends: the last index of each run of equal values.
    ends = np.flatnonzero(np.append(sorted_miss[1:] != sorted_miss[:-1], True))
    means_at_ends = np.cumsum(sorted_miss)[ends] / (ends + 1)
    assert np.all(np.abs(means_at_ends - bound) > 1e-6), "a bound too close to a prefix mean"
    smallest_from = np.minimum.accumulate(means_at_ends[::-1])[::-1]
    tie_of_sorted = np.repeat(np.arange(len(ends)), np.diff(np.append(-1, ends)))
    q_sorted = smallest_from[tie_of_sorted]
    q = np.empty_like(q_sorted)
    q[order] = q_sorted
    return q <= bound, q


def case(name, model, prior, groups, event, threshold, bound):
    counts, sizes = groups
    a, b = prior
    if model == "beta-binomial":
        post = stats.beta(a + counts, b + sizes - counts)
    else:
        post = stats.gamma(a + counts, scale=1.0 / (b + sizes))
    # The probability of no event, each from its own tail (not 1 - P(event)).
    no_event = post.cdf(threshold) if event == "above" else post.sf(threshold)
    flagged, q = flags(no_event, bound)
    return {
        "name": name,
        "model": model,
        "prior": list(prior),
        "event": event,
        "threshold": threshold,
        "bound": bound,
        "counts": counts.tolist(),
        "sizes": sizes.tolist(),
        "flagged": flagged.tolist(),
        "flag_fdr": q.tolist(),
    }


def binomial_groups(count, mean, strength):
    sizes = rng.choice([1, 2, 3, 5, 10, 20, 50, 200, 1000], size=count)
    rates = rng.beta(mean * strength, (1 - mean) * strength, size=count)
    return rng.binomial(sizes, rates), sizes


def poisson_groups(count, shape, rate):
    exposure = np.round(rng.lognormal(1.5, 1.2, size=count), 3)
    rates = rng.gamma(shape, 1.0 / rate, size=count)
    return rng.poisson(exposure * rates), exposure


cases = [
    case("proportions above", "beta-binomial", (3.0, 27.0), binomial_groups(800, 0.1, 30), "above", 0.15, 0.05),
    case("proportions below", "beta-binomial", (3.0, 27.0), binomial_groups(800, 0.1, 30), "below", 0.08, 0.2),
    case("ratios above one", "gamma-poisson", (4.0, 4.0), poisson_groups(600, 4.0, 4.0), "above", 1.0, 0.1),
]
with open("tests/fixtures/flags.json", "w") as out:
    json.dump({"source": "scipy.stats tails and the rule in numpy; scripts/make_flag_fixtures.py", "cases": cases}, out)
print({c["name"]: sum(c["flagged"]) for c in cases})
