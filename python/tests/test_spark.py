"""ratepool.spark.fit on a real Spark engine (local mode): every output
column of every row equals the command line's output on the same rows."""

from __future__ import annotations

import os
import sys

import pandas as pd
import pytest

import ratepool
from conftest import DEMO

# CI sets this so that a missing pyspark fails instead of skipping.
if os.environ.get("RATEPOOL_REQUIRE_SPARK"):
    import pyspark  # noqa: F401
pyspark = pytest.importorskip("pyspark")

import ratepool.spark  # noqa: E402


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    # Spark's Python workers run this interpreter, which has pyarrow.
    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)

    session = (
        SparkSession.builder.master("local[2]")
        .appName("ratepool-test")
        .config("spark.ui.enabled", "false")
        .config("spark.sql.shuffle.partitions", "4")
        .config("spark.driver.bindAddress", "127.0.0.1")
        .getOrCreate()
    )
    yield session
    session.stop()


def test_a_segmented_spark_fit_with_decisions_equals_the_command_line(spark, cli):
    rows = pd.read_csv(DEMO / "sellers.csv")
    frame = spark.createDataFrame(rows)
    options = dict(model="beta-binomial", group="seller_id", successes="positive_ratings",
                   trials="total_ratings", by="category", above=0.9, flag_fdr=0.1, ranks=True,
                   top=20, top_method="threshold")
    result = ratepool.spark.fit(frame, **options)
    ours = result.table.toPandas().set_index("seller_id").sort_index()
    table, summary = cli.run(
        "fit", "--input", "demo-data/sellers.csv", "--model", "beta-binomial", "--group", "seller_id",
        "--successes", "positive_ratings", "--trials", "total_ratings", "--by", "category",
        "--above", "0.9", "--flag-fdr", "0.1", "--ranks", "--top", "20", "--top-method", "threshold",
    )
    theirs = table.to_pandas().set_index("seller_id").sort_index()
    assert len(ours) == len(theirs) == len(rows)
    posterior_columns = [c for c in theirs.columns if c not in rows.columns]
    assert posterior_columns and all(c in ours.columns for c in posterior_columns)
    for column in posterior_columns:
        pd.testing.assert_series_equal(ours[column], theirs[column], check_dtype=False,
                                       check_exact=True, obj=column)
    assert result.summary["prior"] == summary["prior"]
    assert result.summary["flags"] == summary["flags"]
    assert result.summary["groups"] == summary["groups"]
    assert int(result.keys.column("group_count").to_numpy().sum()) == len(rows)


def test_a_spark_frame_given_to_fit_is_collected_to_the_driver_and_gives_the_same(spark):
    # pyspark 4 frames offer the Arrow PyCapsule interface: ratepool.fit reads
    # the rows on the driver (ratepool.spark.fit is the one that scales out).
    rows = pd.read_csv(DEMO / "marketplace.csv").head(3000)
    options = dict(model="beta-binomial", group="seller_id", successes="positive_ratings",
                   trials="total_ratings")
    from_spark = ratepool.fit(spark.createDataFrame(rows), **options).table
    from_pandas = ratepool.fit(rows, **options).table
    assert from_spark.column("posterior_mean").equals(from_pandas.column("posterior_mean"))


def test_a_missing_column_names_the_spark_frames_columns(spark):
    frame = spark.createDataFrame(pd.DataFrame({"id": ["a"], "k": [1], "n": [2]}))
    with pytest.raises(ratepool.InputError, match="available columns: id, k, n"):
        ratepool.spark.fit(frame, model="beta-binomial", group="id", successes="k", trials="trials")


def test_a_bad_value_is_named_by_its_rows_key_and_column(spark):
    rows = pd.DataFrame({"id": ["a", "b", "c", "d"], "k": [1, 5, 5, 2], "n": [3, 3, 3, 4]})
    with pytest.raises(ratepool.InputError) as caught:
        ratepool.spark.fit(spark.createDataFrame(rows), model="beta-binomial", group="id",
                           successes="k", trials="n")
    error = caught.value
    assert str(error).startswith("the 2 rows with k=5, n=3: column 'k': ")
    assert error.column == "k" and error.reason == "5 successes exceed 3 trials"
    assert error.row is None


def test_the_spark_docstring_example_prints_what_it_shows(spark):
    import doctest
    import os

    from conftest import ROOT

    here = os.getcwd()
    os.chdir(ROOT)
    try:
        finder = doctest.DocTestFinder()
        runner = doctest.DocTestRunner(verbose=False)
        for test in finder.find(ratepool.spark.fit, "fit", globs={"ratepool": ratepool}):
            runner.run(test)
    finally:
        os.chdir(here)
    results = runner.summarize(verbose=False)
    assert results.attempted >= 4 and results.failed == 0
