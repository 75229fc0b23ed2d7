"""The typed sections of calibration.json (storage/calibration_sections.py): the credit part,
the Heston indices, the driver correlation and the fit records read back exactly what the
owners wrote, a missing optional section reads as absent, a missing required value raises a
ConfigError naming the file and the key, and the model objects built from the records equal
the ones written.

Common practice for a versioned file format (round trip: what the writer wrote, the reader
gives back; errors name the file and the key) rather than a published source; every value
checked is written into the test's own record.
"""

from __future__ import annotations

import copy

import numpy as np
import pytest

from pqflow.calibration.heston_parts import heston_from_record, heston_to_json
from pqflow.calibration.parts import DriverCorrelation, credit_from_record, credit_to_json
from pqflow.errors import ConfigError
from pqflow.models.cir_credit import CirCreditModel, CirParams, CreditRating, HazardCurve
from pqflow.models.heston import HestonIndex, HestonParams, HestonPricesOfRisk
from pqflow.storage.calibration_file import calibration_document, calibration_record

__all__: list[str] = []

SOURCE = "run/calibration.json"


def _credit() -> CirCreditModel:
    def rating(name: str, price: float, y0: float) -> CreditRating:
        return CreditRating(name=name, recovery=0.4, price_of_risk=price,
                            cir=CirParams(mean_reversion=0.4, long_run_mean=0.01, volatility=0.05, initial=y0),
                            hazard=HazardCurve(knots=np.array([1.0, 5.0]), hazards=np.array([0.005, 0.009])))

    return CirCreditModel(ratings=(rating("AA", 0.0, 0.001), rating("BBB", -1.05, 0.01)), bond_maturities=(1.0, 5.0),
                          correlation=np.array([[1.0, 0.6], [0.6, 1.0]]))


def _heston() -> HestonIndex:
    return HestonIndex(name="veld", column="equity_veld", level=1000.0, income_yield=0.028,
                       params=HestonParams(v0=0.03, kappa=1.1, theta=0.04, xi=0.5, rho=-0.55),
                       prices_of_risk=HestonPricesOfRisk(equity=0.26, variance=0.47, kappa_real_world=1.1,
                                                         theta_real_world=0.04),
                       loadings=(("rates", -0.04), ("world", 0.67)), explained=0.6, rates_correlation=-0.15,
                       substeps_per_year=12)


def _content(*, with_parts: bool = True) -> dict:
    parameters: dict = {"curve": {"kind": "log_discount", "times": [1.0], "discount_factors": [0.97]},
                        "rates_model": "hull_white", "hull_white": {"mean_reversion": 0.05, "volatility": 0.01}}
    fit: dict = {"curve": {"method": "Smith-Wilson", "ufr": 0.034, "alpha": 0.1, "inputs_used": 20}}
    if with_parts:
        parameters["driver_correlation"] = DriverCorrelation(
            names=("rates", "veld", "world"),
            matrix=np.array([[1.0, -0.15, -0.1], [-0.15, 1.0, 0.75], [-0.1, 0.75, 1.0]])).to_json()
        parameters["credit"] = credit_to_json(_credit(), 12)
        parameters["stochastic_volatility"] = heston_to_json({"veld": _heston()})
        fit["hull_white"] = {"rmse_bp": 2.5, "rows": [{"expiry": 1.0, "tenor": 5.0, "market_vol": 85.7,
                                                       "model_vol": 81.0, "vol_difference_bp": -4.7}]}
        fit["credit"] = {"method": "bootstrap", "ratings": [
            {"rating": "AA", "fitted": ["initial"], "max_abs_error_bp": 1e-13, "min_shift": 0.0, "max_shift": 0.004,
             "feller_ratio": 3.2, "price_of_risk": 0.0,
             "rows": [{"maturity": 1.0, "market_spread": 0.0028}, {"maturity": 5.0, "market_spread": 0.0043}]}]}
        fit["correlation"] = {"method": "from file", "repaired": True, "frobenius_distance": 0.02}
        fit["heston"] = {"veld": {
            "method": "Heston fit", "parameters": {"v0": 0.03, "kappa": 1.1, "theta": 0.04, "xi": 0.5, "rho": -0.55},
            "feller_ratio": 0.35, "rmse_vol_points": 0.15, "max_abs_vol_points": 0.43, "at_bounds": [],
            "rows": [{"expiry": 0.5, "moneyness": 0.6, "kind": "put", "weight": 1.0, "market_vol": 0.3043,
                      "model_vol": 0.3030, "vol_points": -0.13}]}}
    return calibration_document(pqflow_version="0.0-test", valuation_date="2025-12-31", horizon_years=30.0,
                                inputs_sha256="abc", inputs={}, parameters=parameters, fit=fit, instruments={},
                                expected_short_rate={})


def test_sections_read_back_what_the_owners_wrote():
    rec = calibration_record(_content(), SOURCE)
    credit = rec.credit
    assert credit is not None and credit.names == ("AA", "BBB") and credit.priced
    assert credit.bond_maturities == (1.0, 5.0) and credit.substeps_per_year == 12
    assert credit.correlation == ((1.0, 0.6), (0.6, 1.0))
    bbb = credit.ratings[1]
    assert (bbb.recovery, bbb.price_of_risk, bbb.cir.initial, bbb.hazard.hazards) == (0.4, -1.05, 0.01, (0.005, 0.009))
    model, substeps = credit_from_record(credit)
    want = _credit()
    assert substeps == 12 and model.bond_maturities == want.bond_maturities
    np.testing.assert_array_equal(model.correlation, want.correlation)
    for got, exp in zip(model.ratings, want.ratings, strict=True):
        assert (got.name, got.recovery, got.price_of_risk, got.cir) == (exp.name, exp.recovery, exp.price_of_risk,
                                                                         exp.cir)
        np.testing.assert_array_equal(got.hazard.hazards, exp.hazard.hazards)

    heston = rec.stochastic_volatility
    assert list(heston) == ["veld"] and heston.columns == {"equity_veld"}
    assert heston_from_record(heston["veld"]) == _heston()

    dc = rec.driver_correlation
    assert dc is not None and dc.drivers == ("rates", "veld", "world")
    assert list(dc.pairs()) == [("rates", "veld", -0.15), ("rates", "world", -0.1), ("veld", "world", 0.75)]
    assert DriverCorrelation.from_record(dc).pair("veld", "world") == 0.75


def test_fit_records_read_back_what_was_written():
    rec = calibration_record(_content(), SOURCE)
    curve = rec.curve_fit
    assert (curve.method, curve.ufr, curve.alpha, curve.inputs_used, curve.omega) == ("Smith-Wilson", 0.034, 0.1, 20,
                                                                                       None)
    rates = rec.rates_fit
    assert rates.rmse_bp == 2.5 and rates.swaptions[0].vol_difference_bp == -4.7
    aa = rec.credit_fit.by_rating()["AA"]
    assert aa.fitted == ("initial",) and aa.feller_ratio == 3.2 and aa.real_world_long_run_mean is None
    assert [(p.maturity, p.market_spread) for p in aa.spreads] == [(1.0, 0.0028), (5.0, 0.0043)]
    corr = rec.correlation_fit
    assert corr.repaired and corr.frobenius_distance == 0.02
    smile = rec.heston_fits["veld"]
    assert (smile.kappa, smile.feller_ratio, smile.rows[0].kind, smile.rows[0].vol_points) == (1.1, 0.35, "put", -0.13)
    names = [e.name for e in rec.fit_entries()]
    assert names == ["curve", "hull_white", "credit", "credit AA", "correlation"]  # the smile fit has its own view
    assert "ratings" not in rec.fit_entries()[2].fields and rec.fit_entries()[1].rows[0]["tenor"] == 5.0


def test_a_file_without_the_sections_reads_them_as_absent():
    # runs without credit, Heston or a driver correlation (older runs among them) keep loading
    rec = calibration_record(_content(with_parts=False), SOURCE)
    assert rec.credit is None and rec.driver_correlation is None and len(rec.stochastic_volatility) == 0
    assert rec.credit_fit.ratings == () and rec.heston_fits == {} and not rec.correlation_fit.repaired
    assert rec.rates_fit.rmse_bp is None and rec.rates_fit.swaptions == ()


@pytest.mark.parametrize("drop, read, key", [
    (lambda p, f: p["credit"]["ratings"][1]["cir"].pop("initial"), lambda r: r.credit,
     "parameters.credit.ratings[1].cir.initial"),
    (lambda p, f: p["credit"].pop("substeps_per_year"), lambda r: r.credit, "parameters.credit.substeps_per_year"),
    (lambda p, f: p["stochastic_volatility"]["veld"].pop("xi"), lambda r: r.stochastic_volatility["veld"],
     "parameters.stochastic_volatility.veld.xi"),
    (lambda p, f: p["stochastic_volatility"]["veld"]["prices_of_risk"].pop("variance"),
     lambda r: r.stochastic_volatility["veld"], "parameters.stochastic_volatility.veld.prices_of_risk.variance"),
    (lambda p, f: p["driver_correlation"].pop("matrix"), lambda r: r.driver_correlation,
     "parameters.driver_correlation.matrix"),
    (lambda p, f: f["credit"]["ratings"][0].pop("max_abs_error_bp"), lambda r: r.credit_fit,
     "fit.credit.ratings[0].max_abs_error_bp"),
    (lambda p, f: f["heston"]["veld"]["parameters"].pop("rho"), lambda r: r.heston_fits,
     "fit.heston.veld.parameters.rho"),
    (lambda p, f: f["correlation"].pop("frobenius_distance"), lambda r: r.correlation_fit,
     "fit.correlation.frobenius_distance"),
])
def test_a_missing_required_value_names_the_file_and_the_key(drop, read, key):
    content = copy.deepcopy(_content())
    drop(content["parameters"], content["fit"])
    rec = calibration_record(content, SOURCE)
    with pytest.raises(ConfigError) as info:
        read(rec)
    assert SOURCE in str(info.value) and key in str(info.value), str(info.value)


def _real_world(content: dict) -> dict:
    # the real-world side as the calibration writes it for a house-view path (shape of
    # Calibration.expected_paths and the stored real_world_view / market_prices_of_risk)
    content = copy.deepcopy(content)
    content["parameters"]["real_world_view"] = {"kind": "path", "target": "zero_yield", "target_maturity": 10,
                                                "start": 0.02, "long_run_level": 0.034}
    content["parameters"]["market_prices_of_risk"] = {"rates": {"knots": [1.0], "values": [0.1, 0.2]},
                                                      "equity": 0.25, "note": "text"}
    content["expected_short_rate"] = {
        "time": [0.0, 1.0], "market_consistent": [0.02, 0.021], "real_world": [0.02, 0.024],
        "target": {"quantity": "zero yield, 10 years (continuous)", "time": [0.0, 1.0],
                   "house_view": [0.025, 0.026], "real_world": [0.025, 0.0261]}}
    return content


def test_the_real_world_records_read_back_what_was_written():
    rec = calibration_record(_real_world(_content()), SOURCE)
    esr = rec.expected_short_rate
    assert esr is not None and esr.time == (0.0, 1.0) and esr.real_world == (0.02, 0.024)
    assert esr.market_consistent == (0.02, 0.021)
    assert esr.target is not None and esr.target.house_view == (0.025, 0.026)
    assert esr.target.real_world == (0.025, 0.0261) and esr.target.market_consistent is None
    assert esr.target.quantity == "zero yield, 10 years (continuous)"
    view = rec.real_world_view
    assert (view.kind, view.target, view.target_maturity) == ("path", "zero_yield", 10.0)
    mpr = rec.market_prices_of_risk
    assert mpr is not None and mpr.rates == {"knots": [1.0], "values": [0.1, 0.2]} and mpr.equity == 0.25
    assert mpr.note == "text" and rec.rates_price_of_risk == mpr.rates


def test_a_file_without_the_real_world_side_reads_it_as_absent():
    # a run without a house-view path (typed-in real world) or an older file without the sections
    rec = calibration_record(_content(), SOURCE)
    assert rec.expected_short_rate is None and rec.market_prices_of_risk is None
    assert (rec.real_world_view.kind, rec.real_world_view.target, rec.real_world_view.target_maturity) == (
        None, None, None)
    content = _real_world(_content())
    content["expected_short_rate"].pop("target")
    assert calibration_record(content, SOURCE).expected_short_rate.target is None


@pytest.mark.parametrize("drop, key", [
    (lambda c: c["expected_short_rate"].pop("real_world"), "expected_short_rate.real_world"),
    (lambda c: c["expected_short_rate"].pop("time"), "expected_short_rate.time"),
    (lambda c: c["expected_short_rate"]["target"].pop("house_view"), "expected_short_rate.target.house_view"),
    (lambda c: c["expected_short_rate"]["target"].pop("time"), "expected_short_rate.target.time"),
])
def test_a_missing_real_world_value_names_the_file_and_the_key(drop, key):
    content = _real_world(_content())
    drop(content)
    with pytest.raises(ConfigError) as info:
        _ = calibration_record(content, SOURCE).expected_short_rate
    assert SOURCE in str(info.value) and key in str(info.value), str(info.value)


def test_the_instrument_quotes_read_back_what_was_written_with_their_defaults():
    content = copy.deepcopy(_content())
    content["instruments"] = {
        "swaptions": [{"expiry": 1.0, "tenor": 5.0, "strike": 0.025, "convention": "normal", "shift": 0.0,
                       "market_vol": 0.0085, "market_price": 0.004, "model_price": 0.0041, "weight": 0.5},
                      {"expiry": 2.0, "tenor": 3.0, "strike": 0.02, "market_vol": None, "market_price": None}],
        "equity_options": [{"expiry": 1.0, "strike": 1000.0, "index": "veld", "kind": "put", "column_kind": "equity",
                            "market_vol": 0.2, "market_price": 70.0, "model_price": 71.0},
                           {"expiry": 2.0, "strike": 900.0}],
        "inflation_caps": [{"whatever": "the inflation kind's own form"}],
    }
    rec = calibration_record(content, SOURCE)
    first, second = rec.swaptions
    assert (first.expiry, first.tenor, first.strike, first.market_vol, first.weight) == (1.0, 5.0, 0.025, 0.0085, 0.5)
    assert (first.market_price, first.model_price, first.kind) == (0.004, 0.0041, "payer")
    # a sensitivity's model-only quote: no market volatility or price; the documented defaults
    assert (second.convention, second.shift, second.market_vol, second.market_price, second.weight) == (
        "normal", 0.0, None, None, 1.0)
    put, bare = rec.equity_options
    assert (put.index, put.kind, put.market_vol, put.market_price, put.model_price) == ("veld", "put", 0.2, 70.0, 71.0)
    assert (bare.index, bare.kind, bare.convention, bare.column_kind, bare.market_vol) == (
        None, "call", "lognormal", "equity", None)
    # the part kind's own instruments are its content, handed over as stored
    assert rec.instrument_list("inflation_caps") == [{"whatever": "the inflation kind's own form"}]
    assert calibration_record(_content(), SOURCE).swaptions == ()


@pytest.mark.parametrize("kind, item, key", [
    ("swaptions", {"expiry": 1.0, "strike": 0.02}, "instruments.swaptions[0].tenor"),
    ("equity_options", {"expiry": 1.0}, "instruments.equity_options[0].strike"),
])
def test_a_quote_without_a_required_value_names_the_file_and_the_key(kind, item, key):
    content = copy.deepcopy(_content())
    content["instruments"] = {kind: [item]}
    rec = calibration_record(content, SOURCE)
    with pytest.raises(ConfigError) as info:
        _ = rec.swaptions if kind == "swaptions" else rec.equity_options
    assert SOURCE in str(info.value) and key in str(info.value), str(info.value)


def test_the_inflation_kind_reads_its_caps_typed_and_names_a_missing_key():
    # the inflation kind's own instruments (instruments.inflation_caps): the form its calibration writes
    from pqflow.calibration.inflation_kind import yoy_option_quotes

    caps = [{"maturity": 2.0, "strike": 0.03, "kind": "cap", "market_price": 0.006064, "model_price": 0.00602},
            {"maturity": 5.0, "strike": 0.01, "kind": "floor"}]
    cap, floor = yoy_option_quotes(caps)
    assert (cap.maturity, cap.strike, cap.kind, cap.market_price, cap.model_price) == (
        2.0, 0.03, "cap", 0.006064, 0.00602)
    assert (floor.kind, floor.market_price, floor.model_price) == ("floor", None, None)
    with pytest.raises(ConfigError) as info:
        yoy_option_quotes([caps[0], {"maturity": 3.0, "kind": "cap"}])
    assert "calibration.json" in str(info.value) and "instruments.inflation_caps[1].strike" in str(info.value)


def test_a_listed_heston_index_is_read_only_when_asked_for():
    # the names (which columns are stochastic-volatility ones) do not need a complete entry
    content = _content()
    content["parameters"]["stochastic_volatility"]["veld"].pop("level")
    rec = calibration_record(content, SOURCE)
    assert list(rec.stochastic_volatility) == ["veld"]
    with pytest.raises(ConfigError, match="parameters.stochastic_volatility.veld.level"):
        _ = rec.stochastic_volatility["veld"]
