"""The smile fit and the wealth ratios by index on the sign-off page (pqflow.report.smile): the
values are the record's own (calibration.json's ``fit.heston``, wealth_ratio_by_index.csv),
shown in vol points, sorted, and counted as the record counts them. Source: the records
themselves and the vol-point convention (100 x the decimal volatility; common practice)."""

from __future__ import annotations

from pqflow.report import smile
from pqflow.storage.calibration_sections import HestonFitRowRecord, heston_fit_records

FIT = {
    "veldmark_all_share": {
        "method": "Heston by weighted least squares",
        "parameters": {"v0": 0.0291, "kappa": 1.0636, "theta": 0.04215, "xi": 0.5445, "rho": -0.5483},
        "feller_ratio": 0.3024, "rmse_vol_points": 0.1504, "max_abs_vol_points": 0.4302,
        "rows": [
            {"expiry": 1.0, "moneyness": 1.1, "kind": "call", "market_vol": 0.1396, "model_vol": 0.1390,
             "vol_points": -0.06},
            {"expiry": 0.5, "moneyness": 0.6, "kind": "put", "market_vol": 0.3043, "model_vol": 0.30299,
             "vol_points": -0.131},
        ],
    }
}


def test_smile_rows_are_sorted_with_the_difference_in_vol_points() -> None:
    rows = smile.smile_rows(heston_fit_records(FIT, "calibration.json")["veldmark_all_share"].rows)
    assert [(r["expiry"], r["moneyness"]) for r in rows] == [(0.5, 0.6), (1.0, 1.1)]
    assert abs(rows[0]["difference"] - (-0.131)) < 1e-12
    # without the recorded difference it is 100 x (model - market)
    no_diff = [HestonFitRowRecord(expiry=1, moneyness=1, kind="call", market_vol=0.20, model_vol=0.2125)]
    assert abs(smile.smile_rows(no_diff)[0]["difference"] - 1.25) < 1e-12


def test_smile_fit_html_shows_parameters_feller_rmse_and_every_quote() -> None:
    html = smile.smile_fit_html(heston_fit_records(FIT, "calibration.json"))
    for text in ("veldmark all share", "0.0291", "1.064", "0.302", "below 1", "0.150", "0.430",
                 "30.43", "30.30", "-0.13", "13.96", "13.90", "-0.06", "put", "call"):
        assert text in html, text
    assert html.index("30.43") < html.index("13.96")  # sorted by expiry
    assert smile.smile_fit_html(None) == "" and smile.smile_fit_html({}) == ""


def test_wealth_ratio_table_puts_indices_side_by_side_and_counts_met_cells() -> None:
    rows = [
        {"horizon": 1, "percentile": 0.9, "tail": "right", "model": 1.26, "benchmark": 1.28, "requirement": ">=",
         "pass": "False", "index": "equity_a", "volatility_model": "heston"},
        {"horizon": 1, "percentile": 0.025, "tail": "left", "model": 0.71, "benchmark": 0.78, "requirement": "<=",
         "pass": "True", "index": "equity_a", "volatility_model": "heston"},
        {"horizon": 1, "percentile": 0.9, "tail": "right", "model": 1.30, "benchmark": 1.28, "requirement": ">=",
         "pass": "True", "index": "equity_b", "volatility_model": "deterministic"},
        {"horizon": 1, "percentile": 0.025, "tail": "left", "model": 0.76, "benchmark": 0.78, "requirement": "<=",
         "pass": "True", "index": "equity_b", "volatility_model": "deterministic"},
    ]
    indices, cells = smile.wealth_ratio_pivot(rows)
    assert indices == ["equity_a", "equity_b"]
    assert [c["percentile"] for c in cells] == [0.025, 0.9]
    assert cells[1]["by_index"] == {"equity_a": (1.26, False), "equity_b": (1.30, True)}
    by_index = {"equity_a": {"volatility_model": "heston", "met": 1, "cells": 2},
                "equity_b": {"volatility_model": "deterministic", "met": 2, "cells": 2}}
    html = smile.wealth_ratio_by_index_html(rows, by_index)
    assert "equity_a (heston)" in html and "equity_b (deterministic)" in html
    assert "<strong>1.26 missed</strong>" in html and "1.30" in html
    assert "meets 1 of 2 cells" in html and "meets 2 of 2 cells" in html
    # without the summary's counts they are counted from the rows
    assert "meets 1 of 2 cells" in smile.wealth_ratio_by_index_html(rows, None)
    assert smile.wealth_ratio_by_index_html([], by_index) == ""
