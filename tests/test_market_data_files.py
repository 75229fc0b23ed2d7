"""Market-data CSV readers: good files load, and every bad file names its file, row and column.

The bad files are hand-made with one known fault each; the expected position in the message is
known by construction (data rows are 1-based with the header excluded; the header is line 1).
"""

from __future__ import annotations

import numpy as np
import pytest

from pqflow.errors import MarketDataError
from pqflow.market.data_files import read_correlation_matrix, read_curve_inputs


def _write(tmp_path, name: str, text: str):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_good_curve_files(tmp_path):
    par = read_curve_inputs(
        _write(tmp_path, "par.csv", "maturity_years,par_rate\n1,0.03\n2,0.031\n5,0.032\n")
    )
    assert par.quantity == "par_rate"
    np.testing.assert_array_equal(par.maturities, [1.0, 2.0, 5.0])
    np.testing.assert_array_equal(par.values, [0.03, 0.031, 0.032])
    # A byte-order mark and a trailing blank line are tolerated (common in spreadsheet exports).
    zero = read_curve_inputs(
        _write(tmp_path, "zero.csv", "\ufeffmaturity_years,zero_rate\n0.5,0.01\n1,0.012\n\n")
    )
    assert zero.quantity == "zero_rate" and zero.maturities.tolist() == [0.5, 1.0]
    df = read_curve_inputs(
        _write(tmp_path, "df.csv", "maturity_years,discount_factor\n1,0.97\n3,0.91\n")
    )
    # Discount factors become zero-coupon instruments worth exactly the discount factor.
    np.testing.assert_allclose(df.instruments().market_values, [0.97, 0.91], rtol=1e-14)


BAD_CURVES = [
    # (file text, pieces the message must contain)
    (
        "maturity_years,par_rate\n1,0.03\n2,\n3,0.032\n",
        ["data row 2 (line 3)", "column 'par_rate'", "missing value"],
    ),
    (
        "maturity_years,par_rate\n1,0.03\n2,0.031\n3,NaN\n",
        ["data row 3 (line 4)", "column 'par_rate'", "NaN"],
    ),
    (
        "maturity_years,par_rate\n1,0.03\n2,abc\n",
        ["data row 2 (line 3)", "column 'par_rate'", "'abc' is not a number"],
    ),
    (
        "maturity_years,zero_rate\n1,0.03\n2,inf\n",
        ["data row 2 (line 3)", "column 'zero_rate'", "not finite"],
    ),
    (
        "maturity_years,par_rate\n1,0.03\n3,0.031\n2,0.032\n",
        ["data row 3 (line 4)", "column 'maturity_years'", "strictly increasing"],
    ),
    (
        "maturity_years,zero_rate\n0,0.03\n1,0.031\n",
        ["data row 1 (line 2)", "column 'maturity_years'", "must be positive"],
    ),
    (
        "maturity_years,par_rate\n1,3.1\n2,3.2\n",
        ["data row 1 (line 2)", "column 'par_rate'", "decimals"],
    ),
    (
        "maturity_years,discount_factor\n1,0.97\n2,-0.5\n",
        ["data row 2 (line 3)", "column 'discount_factor'", "must be positive"],
    ),
    (
        "maturity_years,par_rate\n1,0.03\n2.5,0.031\n",
        ["data row 2 (line 3)", "column 'maturity_years'", "whole number of years"],
    ),
    (
        "maturity_years,par_rate\n1,0.03\n2\n",
        ["data row 2 (line 3)", "1 cells but the header", "2 columns"],
    ),
    ("maturity_years,par_rate\n1,0,03\n", ["data row 1 (line 2)", "3 cells"]),
    (
        "maturity_years,par_rate\n\n1,0.03\n\n2,\n",
        ["data row 2 (line 5)", "column 'par_rate'"],
    ),  # blank lines: true line numbers
    ("maturity_years,par_rate,zero_rate\n1,0.03,0.03\n", ["line 1", "exactly one value column"]),
    ("maturity_years,swap\n1,0.03\n", ["line 1", "unknown column 'swap'"]),
    ("tenor,par_rate\n1,0.03\n", ["line 1", "no 'maturity_years' column"]),
    ("maturity_years,par_rate\n", ["no data rows"]),
]


@pytest.mark.parametrize("text, pieces", BAD_CURVES)
def test_bad_curve_files_name_file_row_and_column(tmp_path, text, pieces):
    path = _write(tmp_path, "curve_inputs.csv", text)
    with pytest.raises(MarketDataError) as err:
        read_curve_inputs(path)
    message = str(err.value)
    assert str(path) in message
    for piece in pieces:
        assert piece in message, message


def test_missing_file(tmp_path):
    with pytest.raises(MarketDataError, match="not found"):
        read_curve_inputs(tmp_path / "absent.csv")


GOOD_CORR = "driver,rates,equity,credit\nrates,1,-0.2,0.1\nequity,-0.2,1,0.3\ncredit,0.1,0.3,1\n"


def test_good_correlation_file(tmp_path):
    corr = read_correlation_matrix(_write(tmp_path, "corr.csv", GOOD_CORR))
    assert corr.names == ("rates", "equity", "credit")
    np.testing.assert_array_equal(corr.matrix, [[1, -0.2, 0.1], [-0.2, 1, 0.3], [0.1, 0.3, 1]])


BAD_CORRS = [
    (
        "driver,rates,equity\nrates,1,1.2\nequity,1.2,1\n",
        ["data row 1 (line 2)", "column 'equity'", "outside [-1, 1]"],
    ),
    (
        "driver,rates,equity\nrates,1,-0.2\nequity,-0.25,1\n",
        [
            "data row 2 (line 3)",
            "column 'rates'",
            "data row 1 (line 2), column 'equity'",
            "symmetric",
        ],
    ),
    (
        "driver,rates,equity\nrates,0.99,-0.2\nequity,-0.2,1\n",
        ["data row 1 (line 2)", "column 'rates'", "must be 1"],
    ),
    (
        "driver,rates,equity\nequity,1,-0.2\nrates,-0.2,1\n",
        ["data row 1 (line 2)", "column 'driver'", "'equity'", "'rates'"],
    ),
    (
        "driver,rates,equity\nrates,1,\nequity,-0.2,1\n",
        ["data row 1 (line 2)", "column 'equity'", "missing value"],
    ),
    (
        "driver,rates,equity\nrates,1,nan\nequity,-0.2,1\n",
        ["data row 1 (line 2)", "column 'equity'", "NaN"],
    ),
    ("driver,rates,equity\nrates,1,-0.2\n", ["1 data rows", "2 drivers", "square"]),
    ("driver,rates,rates\nrates,1,-0.2\nrates,-0.2,1\n", ["line 1", "appears twice"]),
]


@pytest.mark.parametrize("text, pieces", BAD_CORRS)
def test_bad_correlation_files_name_file_row_and_column(tmp_path, text, pieces):
    path = _write(tmp_path, "correlations.csv", text)
    with pytest.raises(MarketDataError) as err:
        read_correlation_matrix(path)
    message = str(err.value)
    assert str(path) in message
    for piece in pieces:
        assert piece in message, message
