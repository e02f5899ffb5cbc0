"""ratepool from Python: empirical-Bayes rate shrinkage over many groups.

`fit` fits a prior to all groups by maximum marginal likelihood and gives
every group its posterior; `score` reuses a saved prior; `fit_pairs` fits from
a table of distinct pairs (as a SQL GROUP BY gives) and scores each pair. The
data is a file path, or any table offering the Arrow PyCapsule interface
(pyarrow, polars, pandas through pyarrow); it is read by the same engine as
the command line, with the same options under the same names (`flag_fdr` for
`--flag-fdr`), and gives the same numbers.

    >>> import polars as pl, ratepool
    >>> sellers = pl.read_csv("demo-data/marketplace.csv")
    >>> result = ratepool.fit(sellers, model="beta-binomial", group="seller_id",
    ...                       successes="positive_ratings", trials="total_ratings")
    >>> result.table.column_names[:3]
    ['seller_id', 'positive_ratings', 'total_ratings']
"""

from __future__ import annotations

import json
import os
from typing import Any, Dict, Union

from . import _engine
from ._engine import Result, options
from .errors import FitError, InputError, RatepoolError, UsageError

__all__ = [
    "fit",
    "score",
    "fit_pairs",
    "options",
    "Result",
    "RatepoolError",
    "InputError",
    "UsageError",
    "FitError",
]


def fit(data: Any, **options: Any) -> Result:
    """Fits a prior to all groups of `data` and scores every group.

    `data` is a path to a CSV or Parquet file (or a folder of Parquet parts),
    or a table offering the Arrow PyCapsule interface: a pyarrow Table or
    RecordBatchReader, a polars DataFrame, or a pandas DataFrame (through
    pyarrow; its index is ignored, whatever it is). The options are those of
    `ratepool fit` (see `ratepool.options("fit")`), `-` written `_`: a flag
    takes True, a list option a list or a comma-separated string.

    Returns a `Result`: `.table` (pyarrow, one row per group in the data's
    order), `.summary` (a dict), `.to_polars()`, `.to_pandas()`. Errors raise
    `InputError` (naming the row and column of a bad value), `UsageError` or
    `FitError`; Ctrl-C raises KeyboardInterrupt and writes nothing.

    >>> result = ratepool.fit("demo-data/districts.csv", model="gamma-poisson",
    ...     group="district_id", events="observed_cases", exposure="expected_cases",
    ...     above=1, flag_fdr=0.1)
    >>> result.summary["model"]
    'gamma-poisson'
    """
    return _engine.run("fit", data, options)


def score(data: Any, prior: Union[str, os.PathLike, Dict[str, Any]], **options: Any) -> Result:
    """Scores the groups of `data` with a saved prior, without refitting.

    `prior` is a summary file written by a fit (`summary="prior.json"`), or
    the `.summary` of an earlier `fit` result. The other options are those of
    `ratepool score`; `data` and the result are as for `fit`.

    >>> import polars as pl
    >>> sellers = pl.read_csv("demo-data/marketplace.csv")
    >>> prior = ratepool.fit(sellers, model="beta-binomial", group="seller_id",
    ...     successes="positive_ratings", trials="total_ratings").summary
    >>> ratepool.score(sellers.head(100), prior=prior, group="seller_id",
    ...     successes="positive_ratings", trials="total_ratings").table.num_rows
    100
    """
    if isinstance(prior, dict):
        result = _engine.run("score", data, options, scratch=[("prior", json.dumps(prior))])
        # The prior went through a temporary file; say where it came from instead.
        if isinstance(result.summary.get("fit"), dict) and "source" in result.summary["fit"]:
            result.summary["fit"]["source"] = "the prior argument (a summary dict)"
        return result
    return _engine.run("score", data, dict(options, prior=prior))


def fit_pairs(pairs: Any, weights: str, **options: Any) -> Result:
    """Fits a prior from a table of distinct pairs and scores each pair.

    Each row of `pairs` is one distinct pair (with its segment columns, under
    `by`), and the column `weights` holds how many groups share it, as a SQL
    `GROUP BY ... count(*)` gives. `.table` has one row per pair: the pair,
    `group_count`, and every per-pair column (posterior, interval, pool
    weight, exceedance, ranks and flags decided over all the groups). Join it
    back to the rows on the pair's columns. Options as for `fit`.

    >>> import pyarrow.csv as pacsv
    >>> rows = pacsv.read_csv("demo-data/marketplace.csv")
    >>> keys = rows.group_by(["positive_ratings", "total_ratings"]).aggregate([([], "count_all")])
    >>> scored = ratepool.fit_pairs(keys, weights="count_all", model="beta-binomial",
    ...     successes="positive_ratings", trials="total_ratings")
    >>> scored.table.num_rows == keys.num_rows, scored.table.column_names[2]
    (True, 'group_count')
    """
    return _engine.run("fit", pairs, dict(options, pair_counts=weights), table_option="pair_output")
