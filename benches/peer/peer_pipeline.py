"""The yardstick: the same job as `ratepool fit` written the way a careful
analyst would with pandas and scipy, one row per group throughout.

1. read the Parquet input with pandas;
2. fit Beta(alpha, beta) by maximising the sum of scipy's per-row
   beta-binomial log pmf (L-BFGS-B on log alpha, log beta, from the
   method-of-moments start);
3. posterior mean, sd and the 95% equal-tailed interval with scipy's beta
   quantile function;
4. write the table to Parquet (pyarrow, zstd).

usage: python3 benches/peer/peer_pipeline.py IN.parquet OUT.parquet
"""
import sys
import time

import numpy as np
import pandas as pd
from scipy import optimize, stats


def moments_start(k: np.ndarray, n: np.ndarray) -> np.ndarray:
    has = n > 0
    rate = k[has] / n[has]
    mean, var = rate.mean(), rate.var()
    strength = max(mean * (1 - mean) / max(var, 1e-12) - 1, 1e-3)
    return np.log([mean * strength, (1 - mean) * strength])


def main() -> None:
    source, target = sys.argv[1], sys.argv[2]
    clock = time.perf_counter()
    frame = pd.read_parquet(source)
    k = frame["positive_ratings"].to_numpy()
    n = frame["total_ratings"].to_numpy()
    read = time.perf_counter()

    def negative_log_likelihood(log_params: np.ndarray) -> float:
        alpha, beta = np.exp(log_params)
        return -stats.betabinom.logpmf(k, n, alpha, beta).sum()

    result = optimize.minimize(negative_log_likelihood, moments_start(k, n), method="L-BFGS-B")
    alpha, beta = np.exp(result.x)
    fitted = time.perf_counter()

    a, b = alpha + k, beta + n - k
    frame["raw_proportion"] = np.where(n > 0, k / np.maximum(n, 1), np.nan)
    frame["posterior_mean"] = a / (a + b)
    frame["posterior_sd"] = np.sqrt(a * b / ((a + b) ** 2 * (a + b + 1)))
    frame["interval_lo"] = stats.beta.ppf(0.025, a, b)
    frame["interval_hi"] = stats.beta.ppf(0.975, a, b)
    frame["pool_weight"] = (alpha + beta) / (alpha + beta + n)
    frame["posterior_param_alpha"] = a
    frame["posterior_param_beta"] = b
    scored = time.perf_counter()
    frame.to_parquet(target, compression="zstd", index=False)
    done = time.perf_counter()
    print(
        f"peer alpha={alpha:.6f} beta={beta:.6f} evaluations={result.nfev} "
        f"read={read - clock:.2f}s fit={fitted - read:.2f}s score={scored - fitted:.2f}s "
        f"write={done - scored:.2f}s total={done - clock:.2f}s",
        file=sys.stderr,
    )


if __name__ == "__main__":
    main()
