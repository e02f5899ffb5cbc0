"""The strong yardstick: the same job as `ratepool fit`, written the way a
careful analyst would in an afternoon with polars and scipy, working on the
distinct (trials, successes) pairs rather than on every row.

1. read the input with polars (Parquet or CSV);
2. `group_by` the two count columns with `len()`: the distinct pairs and how
   many groups share each;
3. fit (log alpha, log beta) by scipy's L-BFGS-B on the pair-weighted sum of
   `scipy.stats.betabinom.logpmf`, from the method-of-moments start;
4. posterior columns per distinct pair, with `scipy.special.betaincinv` for
   both ends of the 95% equal-tailed interval;
5. join back to the rows, keeping their order;
6. `write_parquet` with polars' defaults (zstd).

The output has the same eleven columns as ratepool's.

usage: python3 benches/peer/strong_peer.py IN.parquet|IN.csv OUT.parquet
"""
import sys
import time

import numpy as np
import polars as pl
from scipy import optimize, special, stats

GROUP, SUCCESSES, TRIALS = "seller_id", "positive_ratings", "total_ratings"


def moments_start(k, n, w):
    has = n > 0
    rate, weight = k[has] / n[has], w[has]
    mean = np.average(rate, weights=weight)
    var = np.average((rate - mean) ** 2, weights=weight)
    strength = max(mean * (1 - mean) / max(var, 1e-12) - 1, 1e-3)
    return np.log([mean * strength, (1 - mean) * strength])


def main():
    source, target = sys.argv[1], sys.argv[2]
    clock = time.perf_counter()
    frame = pl.read_csv(source) if source.endswith(".csv") else pl.read_parquet(source)
    read = time.perf_counter()
    pairs = frame.group_by([TRIALS, SUCCESSES]).len()
    n = pairs[TRIALS].to_numpy().astype(np.float64)
    k = pairs[SUCCESSES].to_numpy().astype(np.float64)
    w = pairs["len"].to_numpy().astype(np.float64)
    grouped = time.perf_counter()

    def negative_log_likelihood(log_params):
        alpha, beta = np.exp(log_params)
        return -(w * stats.betabinom.logpmf(k, n, alpha, beta)).sum()

    result = optimize.minimize(negative_log_likelihood, moments_start(k, n, w), method="L-BFGS-B")
    alpha, beta = np.exp(result.x)
    fitted = time.perf_counter()

    a, b = alpha + k, beta + n - k
    scored_pairs = pairs.select(TRIALS, SUCCESSES).with_columns(
        raw_proportion=pl.Series(np.where(n > 0, k / np.maximum(n, 1), np.nan)).fill_nan(None),
        posterior_mean=pl.Series(a / (a + b)),
        posterior_sd=pl.Series(np.sqrt(a * b / ((a + b) ** 2 * (a + b + 1)))),
        interval_lo=pl.Series(special.betaincinv(a, b, 0.025)),
        interval_hi=pl.Series(special.betaincinv(a, b, 0.975)),
        pool_weight=pl.Series((alpha + beta) / (alpha + beta + n)),
        posterior_param_alpha=pl.Series(a),
        posterior_param_beta=pl.Series(b),
    )
    out = frame.select(GROUP, SUCCESSES, TRIALS).join(
        scored_pairs, on=[TRIALS, SUCCESSES], how="left", maintain_order="left"
    )
    scored = time.perf_counter()
    out.write_parquet(target)
    done = time.perf_counter()
    print(
        f"strong peer alpha={alpha:.6f} beta={beta:.6f} pairs={len(pairs)} evaluations={result.nfev} "
        f"read={read - clock:.2f}s group={grouped - read:.2f}s fit={fitted - grouped:.2f}s "
        f"score+join={scored - fitted:.2f}s write={done - scored:.2f}s total={done - clock:.2f}s",
        file=sys.stderr,
    )


if __name__ == "__main__":
    main()
