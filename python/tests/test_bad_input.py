"""Bad input raises the package's own exceptions with the row, column and
reason, as the command line names them; nothing is written."""

from __future__ import annotations

import polars as pl
import pyarrow as pa
import pytest

import ratepool
from conftest import DEMO

SELLERS = dict(model="beta-binomial", group="seller_id", successes="positive_ratings", trials="total_ratings")


def marketplace() -> pa.Table:
    return pl.read_csv(DEMO / "marketplace.csv").to_arrow()


def test_a_missing_column_names_the_columns_present():
    with pytest.raises(ratepool.InputError) as caught:
        ratepool.fit(marketplace(), **dict(SELLERS, trials="ratings"))
    message = str(caught.value)
    assert "no column 'ratings' (given as the trials column)" in message
    assert "seller_id, positive_ratings, total_ratings" in message


def test_a_float_count_with_a_fraction_names_its_row_and_nothing_is_written(tmp_path):
    table = marketplace()
    trials = table.column("total_ratings").cast(pa.float64()).to_pylist()
    trials[41] = 7.5
    table = table.set_column(2, "total_ratings", pa.array(trials))
    output = tmp_path / "never.parquet"
    with pytest.raises(ratepool.InputError) as caught:
        ratepool.fit(table, **SELLERS, output=str(output))
    error = caught.value
    assert (error.row, error.index, error.column) == (42, 41, "total_ratings")
    assert "7.5" in error.reason and "whole" in error.reason
    assert str(error).startswith("data: row 42, column 'total_ratings'")
    assert not output.exists()
    assert list(tmp_path.iterdir()) == []


def test_whole_floats_are_counts():
    table = marketplace()
    as_floats = table.set_column(2, "total_ratings", table.column("total_ratings").cast(pa.float64()))
    assert ratepool.fit(as_floats, **SELLERS).table.column("posterior_mean").equals(
        ratepool.fit(table, **SELLERS).table.column("posterior_mean")
    )


@pytest.mark.parametrize("frame", ["empty", "filtered"])
def test_a_table_without_rows_is_an_input_error(frame):
    data = pl.read_csv(DEMO / "marketplace.csv")
    data = data.head(0) if frame == "empty" else data.filter(pl.col("total_ratings") < 0)
    with pytest.raises(ratepool.InputError, match="no data rows"):
        ratepool.fit(data, **SELLERS)


@pytest.mark.parametrize("kind", [pa.large_string(), pa.dictionary(pa.int32(), pa.string()), pa.string_view()])
def test_any_text_type_of_id_is_accepted(kind):
    table = marketplace()
    recast = table.set_column(0, "seller_id", table.column("seller_id").cast(kind))
    ours = ratepool.fit(recast, **SELLERS).table
    plain = ratepool.fit(table, **SELLERS).table
    assert ours.column("seller_id").to_pylist() == plain.column("seller_id").to_pylist()
    assert ours.column("interval_hi").equals(plain.column("interval_hi"))


def test_options_of_another_model_are_refused_in_python_words():
    with pytest.raises(ratepool.UsageError) as caught:
        ratepool.fit(marketplace(), **SELLERS, exposure="total_ratings")
    assert "`exposure`" in str(caught.value) and "--" not in str(caught.value)


def test_unknown_keywords_and_wrong_types_are_type_errors():
    with pytest.raises(TypeError, match="unexpected keyword argument 'flagfdr'"):
        ratepool.fit(marketplace(), **SELLERS, flagfdr=0.1)
    with pytest.raises(TypeError, match="ranks takes True or False"):
        ratepool.fit(marketplace(), **SELLERS, ranks="yes")
    with pytest.raises(TypeError, match="data must be a path"):
        ratepool.fit(42, **SELLERS)


def test_a_bad_row_in_a_file_is_named_by_the_file(tmp_path):
    path = tmp_path / "rows.csv"
    path.write_text("seller_id,positive_ratings,total_ratings\na,1,2\nb,3,2\n")
    with pytest.raises(ratepool.InputError) as caught:
        ratepool.fit(str(path), **SELLERS)
    assert str(caught.value).startswith(f"{path}: row 2, column 'positive_ratings'")


def test_a_model_that_cannot_be_fitted_is_a_fit_error_and_a_boundary_is_a_warning():
    no_trials = pa.table({"seller_id": ["a", "b"], "positive_ratings": [0, 0], "trials": [0, 0]})
    with pytest.raises(ratepool.FitError, match="no group has any trials"):
        ratepool.fit(no_trials, **dict(SELLERS, trials="trials"))
    # Groups that differ by no more than sampling noise: complete pooling, said in the warnings.
    alike = pa.table({"seller_id": ["a", "b", "c", "d"], "positive_ratings": [1, 2, 3, 4],
                      "trials": [10, 10, 10, 10]})
    result = ratepool.fit(alike, **dict(SELLERS, trials="trials"))
    assert any("complete pooling" in w for w in result.warnings)
    assert len(set(result.table.column("posterior_mean").to_pylist())) == 1
