"""The package gives the command line's numbers, bit for bit: the same
engine runs on the same rows, whether they arrive as a file or through the
Arrow C stream interface (pyarrow, polars, pandas)."""

from __future__ import annotations

import subprocess

import pandas as pd
import polars as pl
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import ratepool
from conftest import DEMO

SELLERS = dict(model="beta-binomial", group="seller_id", successes="positive_ratings", trials="total_ratings")
SELLERS_ARGS = [
    "--model", "beta-binomial", "--group", "seller_id",
    "--successes", "positive_ratings", "--trials", "total_ratings",
]
# A segmented run with every decision: exceedance, ranks, P(top K), flags.
DECISIONS = dict(by=["category"], above=0.9, ranks=True, top=20, top_method="threshold", flag_fdr=0.1)
DECISION_ARGS = ["--by", "category", "--above", "0.9", "--ranks", "--top", "20", "--top-method", "threshold", "--flag-fdr", "0.1"]


def same_table(ours: pa.Table, theirs: pa.Table) -> None:
    """Every column equal, value for value, bits included (NaN equals NaN)."""
    assert ours.column_names == theirs.column_names
    for name in ours.column_names:
        a, b = ours.column(name).combine_chunks(), theirs.column(name).combine_chunks()
        if pa.types.is_floating(a.type):
            left = a.to_numpy(zero_copy_only=False).view("int64")
            right = b.to_numpy(zero_copy_only=False).view("int64")
            assert (left == right).all(), name
            assert a.null_count == b.null_count, name
        else:
            assert a.cast(b.type).equals(b), name


def test_polars_frame_equals_the_command_line_on_the_demo_marketplace(cli):
    frame = pl.read_csv(DEMO / "marketplace.csv")
    result = ratepool.fit(frame, **SELLERS, ranks=True, above=0.9, flag_fdr=0.1)
    table, summary = cli.run("fit", "--input", "demo-data/marketplace.csv", *SELLERS_ARGS,
                             "--ranks", "--above", "0.9", "--flag-fdr", "0.1")
    same_table(result.table, table)
    assert result.summary == summary
    assert result.table.num_rows == 20_000


@pytest.mark.parametrize("kind", ["pyarrow", "polars", "pandas", "reader", "path"])
def test_a_segmented_run_with_flags_is_the_command_lines_from_any_table(cli, kind):
    path = DEMO / "sellers.csv"
    data = {
        "pyarrow": lambda: pacsv.read_csv(path),
        "polars": lambda: pl.read_csv(path),
        # A non-default index is ignored.
        "pandas": lambda: pd.read_csv(path).set_index("seller_id", drop=False),
        "reader": lambda: pa.RecordBatchReader.from_batches(
            pacsv.read_csv(path).schema, pacsv.read_csv(path).to_batches(max_chunksize=777)
        ),
        "path": lambda: str(path),
    }[kind]()
    result = ratepool.fit(data, **SELLERS, **DECISIONS)
    table, summary = cli.run("fit", "--input", "demo-data/sellers.csv", *SELLERS_ARGS, *DECISION_ARGS)
    same_table(result.table, table)
    assert result.summary == summary
    assert result.summary["flags"]["groups_flagged"] > 0


def test_score_with_a_fitted_summary_equals_the_command_lines_score(cli, tmp_path):
    frame = pl.read_csv(DEMO / "sellers.csv")
    prior = ratepool.fit(frame, **SELLERS, by="category").summary
    scored = ratepool.score(frame.head(500), prior=prior, group="seller_id",
                            successes="positive_ratings", trials="total_ratings", by="category")
    _, saved = cli.run("fit", "--input", "demo-data/sellers.csv", *SELLERS_ARGS, "--by", "category")
    prior_file = tmp_path / "prior.json"
    import json
    prior_file.write_text(json.dumps(saved))
    frame.head(500).write_csv(tmp_path / "head.csv")
    table, summary = cli.run("score", "--prior", str(prior_file), "--input", str(tmp_path / "head.csv"),
                             "--group", "seller_id", "--successes", "positive_ratings",
                             "--trials", "total_ratings", "--by", "category")
    same_table(scored.table, table)
    assert scored.summary["fit"].pop("source") == "the prior argument (a summary dict)"
    assert summary["fit"].pop("source") == str(prior_file)
    assert scored.summary == summary


def test_a_pair_table_gives_the_command_lines_pair_output(cli, tmp_path):
    rows = pacsv.read_csv(DEMO / "sellers.csv")
    keys = (rows.group_by(["category", "positive_ratings", "total_ratings"])
            .aggregate([("seller_id", "count")])
            .rename_columns(["category", "positive_ratings", "total_ratings", "sellers"])
            .sort_by([("category", "ascending"), ("total_ratings", "ascending"),
                      ("positive_ratings", "ascending")]))
    result = ratepool.fit_pairs(keys, weights="sellers", model="beta-binomial",
                                successes="positive_ratings", trials="total_ratings",
                                by="category", above=0.9, flag_fdr=0.1, ranks=True)
    pacsv.write_csv(keys, tmp_path / "keys.csv")
    table, summary = cli.run("fit", "--input", str(tmp_path / "keys.csv"), "--pair-counts", "sellers",
                             "--model", "beta-binomial", "--successes", "positive_ratings",
                             "--trials", "total_ratings", "--by", "category", "--above", "0.9",
                             "--flag-fdr", "0.1", "--ranks", table="--pair-output")
    same_table(result.table, table)
    assert result.summary == summary
    assert result.table.num_rows == keys.num_rows


def test_star_ratings_run_as_on_the_command_line(cli):
    counts = ["stars_1", "stars_2", "stars_3", "stars_4", "stars_5"]
    result = ratepool.fit(pl.read_csv(DEMO / "star_sellers.csv"), model="dirichlet-multinomial",
                          group="seller_id", level_counts=counts, above=4.5, ranks=True)
    table, summary = cli.run("fit", "--input", "demo-data/star_sellers.csv", "--model",
                             "dirichlet-multinomial", "--group", "seller_id", "--level-counts",
                             ",".join(counts), "--above", "4.5", "--ranks")
    same_table(result.table, table)
    assert result.summary == summary


def test_star_ratings_by_category_run_as_on_the_command_line(cli):
    # A Dirichlet prior per category of the demo shops, from a polars frame.
    counts = ["stars_1", "stars_2", "stars_3", "stars_4", "stars_5"]
    result = ratepool.fit(pl.read_csv(DEMO / "star_shops.csv"), model="dirichlet-multinomial",
                          group="shop_id", level_counts=counts, by="category", above=4.5, flag_fdr=0.1)
    table, summary = cli.run("fit", "--input", "demo-data/star_shops.csv", "--model",
                             "dirichlet-multinomial", "--group", "shop_id", "--level-counts",
                             ",".join(counts), "--by", "category", "--above", "4.5", "--flag-fdr", "0.1")
    same_table(result.table, table)
    assert result.summary == summary
    assert result.table.column("prior_fallback").to_pylist().count(True) == 15


def test_to_polars_and_to_pandas_hold_the_table():
    result = ratepool.fit(pl.read_csv(DEMO / "marketplace.csv"), **SELLERS)
    assert result.to_polars().shape == (result.table.num_rows, result.table.num_columns)
    assert list(result.to_pandas().columns) == result.table.column_names


def test_districts_by_age_band_with_the_neighbour_prior_are_the_command_lines(cli, tmp_path):
    # The neighbour table made by the command line from the demo map, then the districts
    # by age band from a polars frame, each pulled toward its neighbourhood's rate.
    pairs = tmp_path / "district_neighbours.csv"
    done = subprocess.run(
        [str(cli.binary), "neighbours", "--map", str(DEMO / "district_map.geojson"),
         "--key", "district_id", "--output", str(pairs)],
        capture_output=True, text=True,
    )
    assert done.returncode == 0, done.stderr
    options = dict(model="gamma-poisson", group="district_id", events="cases", population="population",
                   strata=["age_band"], neighbours=str(pairs), above=1.2, flag_fdr=0.1)
    result = ratepool.fit(pl.read_csv(DEMO / "district_bands.csv"), **options)
    table, summary = cli.run(
        "fit", "--input", "demo-data/district_bands.csv", "--model", "gamma-poisson", "--group", "district_id",
        "--events", "cases", "--population", "population", "--strata", "age_band",
        "--neighbours", str(pairs), "--above", "1.2", "--flag-fdr", "0.1",
    )
    same_table(result.table, table)
    assert result.summary == summary
    assert result.summary["neighbourhood"]["pairs"] == 1121
    assert {"prior_mean", "neighbours"} <= set(result.table.column_names)
