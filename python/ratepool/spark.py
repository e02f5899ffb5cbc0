"""ratepool on a Spark cluster. The fit depends on the data only through the
distinct keys (the segment columns and the two counts of each group), and a
group's posterior only on its key. So the cluster does the heavy work, a GROUP
BY over every row; the driver fits the prior on the key table (at most a few
hundred thousand keys, whatever the number of rows) and scores each key; and
the cluster joins the scored keys back to the rows, broadcast. Ranks,
`prob_top` and flags are decided over all the groups in the key table, so they
are the same as the command line's on the same rows.

Needs pyspark (`pip install ratepool[spark]`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Dict, List, Sequence, Union

import pyarrow as pa

from . import _engine
from .errors import InputError, UsageError

# The column of the key table holding how many groups share a key.
_WEIGHTS = "ratepool_group_count"

# Each model's count and size options, as the command line names them.
_PAIR_OPTIONS = {
    "beta-binomial": ("successes", "trials"),
    "gamma-poisson": ("events", "exposure"),
    "normal-normal": ("estimate", "std_error"),
}


@dataclass
class SparkResult:
    """What a Spark fit gives back: `table`, a Spark DataFrame (every row of
    the input with its group's posterior columns), `summary` the run's summary
    (a dict, as `ratepool.fit` gives), and `keys`, the scored key table
    (pyarrow, one row per distinct key with `group_count`)."""

    table: Any
    summary: Dict[str, Any]
    keys: pa.Table

    @property
    def warnings(self) -> List[str]:
        """The run's warnings, as in the summary."""
        return list(self.summary.get("warnings", []))


def _key_columns(model: str, by: Union[None, str, Sequence[str]], options: Dict[str, Any]) -> List[str]:
    if model not in _PAIR_OPTIONS:
        raise UsageError(
            f"ratepool.spark.fit runs the {', '.join(_PAIR_OPTIONS)} models, not {model}: "
            "their groups are keyed by two counts"
        )
    segments = [by] if isinstance(by, str) else list(by or [])
    counts = []
    for option in _PAIR_OPTIONS[model]:
        name = options.get(option)
        if name is None:
            raise UsageError(f"the {model} model needs `{option}`, the column that holds it")
        counts.append(name)
    return segments + counts


def _about_rows(error: InputError, key_table: pa.Table, keys: List[str]) -> InputError:
    """A bad value of the key table named by the rows it stands for: their
    key and how many there are (a row of the key table means nothing to the
    caller, whose rows are on the cluster)."""
    if error.index is None:
        return error
    key = key_table.slice(error.index, 1).to_pylist()[0]
    described = ", ".join(f"{name}={key[name]!r}" for name in keys)
    rows = key[_WEIGHTS]
    message = (f"the {rows} row{'s' if rows != 1 else ''} with {described}: "
               f"column '{error.column}': {error.reason}")
    return InputError(message, column=error.column, reason=error.reason)


def _to_arrow(frame: Any) -> pa.Table:
    if hasattr(frame, "toArrow"):
        return frame.toArrow()
    return pa.Table.from_pandas(frame.toPandas(), preserve_index=False)


def fit(df: Any, *, model: str, group: Union[str, None] = None, by=None, **options: Any) -> SparkResult:
    """Fits a prior to the groups of a Spark DataFrame, on the cluster.

    `df` has one row per group; `group` names its id column (kept on each
    row, not needed by the fit). The other options are those of
    `ratepool.fit` for the beta-binomial, gamma-poisson and normal-normal
    models: segments (`by`), exceedance (`above`, `below`), `ranks`,
    `flag_fdr`, `top`, `level`, `intervals`, ... Returns a `SparkResult`;
    errors raise as `ratepool.fit` raises them, a bad value named by its
    column and by the key of the rows that hold it (and how many they are).

    >>> from pyspark.sql import SparkSession
    >>> spark = SparkSession.builder.master("local[2]").getOrCreate()
    >>> rows = spark.read.csv("demo-data/sellers.csv", header=True, inferSchema=True)
    >>> result = ratepool.spark.fit(rows, model="beta-binomial", group="seller_id",
    ...     successes="positive_ratings", trials="total_ratings", by="category",
    ...     above=0.9, flag_fdr=0.1)
    >>> result.table.columns[-2:]
    ['flagged', 'flag_fdr']
    """
    from pyspark.sql import functions as F

    keys = _key_columns(model, by, options)
    if group is not None and group not in df.columns:
        raise InputError(
            f"no column '{group}' (given as the group column); available columns: {', '.join(df.columns)}"
        )
    missing = [k for k in keys if k not in df.columns]
    if missing:
        raise InputError(
            f"no column '{missing[0]}'; available columns: {', '.join(df.columns)}"
        )
    counted = df.groupBy(*keys).agg(F.count(F.lit(1)).alias(_WEIGHTS)).orderBy(*keys)
    key_table = _to_arrow(counted)
    try:
        scored = _engine.run(
            "fit",
            key_table,
            dict(options, model=model, by=by, pair_counts=_WEIGHTS),
            table_option="pair_output",
        )
    except InputError as error:
        raise _about_rows(error, key_table, keys) from None
    posteriors = scored.table.drop_columns(["group_count"])
    spark = df.sparkSession
    try:
        right = spark.createDataFrame(posteriors)
    except (TypeError, ValueError):
        right = spark.createDataFrame(posteriors.to_pandas())
    table = df.join(F.broadcast(right), on=keys, how="left").select(
        *df.columns, *[c for c in right.columns if c not in keys]
    )
    return SparkResult(table=table, summary=scored.summary, keys=scored.table)
