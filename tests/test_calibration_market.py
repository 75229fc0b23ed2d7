"""Calibration from the quarter's market-data files (the demo's invented economy)."""

from __future__ import annotations

import copy
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pytest
from conftest import DEMO, write_toml
from curve_helpers import par_rates_from_curve
from scipy.stats import norm
from typer.testing import CliRunner

from pqflow.calibration import assemble_calibration, build_model, load_calibration
from pqflow.cli import app
from pqflow.config import load_config
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.jobs import write_calibration
from pqflow.market.data_files import read_curve_inputs
from pqflow.models.equity import equity_option_price
from pqflow.models.total_return import TotalReturnIndex
from pqflow.simulation import batch_generator, simulate_batch, time_grid


@pytest.fixture(scope="module")
def demo_calibration():
    return assemble_calibration(load_config(DEMO))


def _bs_call(forward, strike, vol, t, df):
    # Black (1976) on the forward with deterministic discounting (Hull, Options, Futures and
    # Other Derivatives, Black's model).
    sd = vol * np.sqrt(t)
    d1 = np.log(forward / strike) / sd + 0.5 * sd
    return df * (forward * norm.cdf(d1) - strike * norm.cdf(d1 - sd))


def test_curve_reprices_inputs_and_meets_the_regulators_convergence_rule(demo_calibration):
    cfg = load_config(DEMO)
    data = read_curve_inputs(cfg.market_file("curve"))
    curve = demo_calibration.curve
    # Every liquid par rate repriced (the method's definition: exact fit to the inputs).
    model_par = par_rates_from_curve(curve, data.maturities)
    assert np.max(np.abs(model_par - data.values)) < 1e-10
    fit = demo_calibration.fit["curve"]
    # EIOPA RFR technical documentation: alpha >= 0.05 and the forward intensity at the
    # convergence point max(LLP + 40, 60) within 1 bp of omega = ln(1 + UFR).
    assert fit["alpha"] >= 0.05
    assert fit["convergence_point"] == 60.0
    assert abs(float(curve.forward(60.0)) - np.log1p(0.034)) <= 1e-4
    assert fit["omega"] == pytest.approx(np.log1p(0.034), rel=1e-15)


def test_swaption_fit_reports_every_instrument(demo_calibration):
    fit = demo_calibration.fit["hull_white"]
    assert len(fit["rows"]) == 24
    # RMSE is the root mean square of the per-quote differences (its definition).
    diffs = np.array([r["vol_difference_bp"] for r in fit["rows"]])
    assert fit["rmse_bp"] == pytest.approx(np.sqrt(np.mean(diffs**2)), rel=1e-12)
    # The invented quotes carry about 2.5 bp of noise around a Hull-White surface.
    assert fit["rmse_bp"] < 5.0
    instruments = demo_calibration.instruments["swaptions"]
    assert len(instruments) == 24 and all(i["market_vol"] < 0.02 for i in instruments)  # decimals


def test_equity_volatility_reprices_each_implied_vol(demo_calibration):
    # Each ATM-forward quote must be repriced exactly by the closed form under Hull-White rates
    # with the bucketed volatility; compare with Black's formula at the quoted vol.
    # The further index (world_equity) is bootstrapped the same way, with its own correlation.
    cal = demo_calibration
    params = {cal.core_index.name: cal.core_index}
    for idx in cal.further_indices:
        params[idx.name] = TotalReturnIndex(
            kind="equity", name=idx.name, level=idx.level, income_yield=idx.income_yield, volatility=idx.volatility,
            correlation=cal.driver_correlation.pair("rates", idx.name),
        )
    seen = set()
    for inst in cal.instruments["equity_options"]:
        eq = params[inst.get("index", cal.core_index.name)]
        seen.add(eq.name)
        t, k = inst["expiry"], inst["strike"]
        df = float(cal.curve.discount(t))
        fwd = eq.level * np.exp(-eq.income_yield * t) / df
        assert k == pytest.approx(fwd, rel=1e-12)  # ATM forward
        model = equity_option_price(cal.curve, cal.rates, eq, expiry=t, strike=k, kind="call")
        assert model == pytest.approx(_bs_call(fwd, k, inst["market_vol"], t, df), rel=1e-10)
    assert seen == {"veldmark_all_share", "world_equity"}


def test_the_real_world_records_read_back_what_the_calibration_wrote(demo_calibration):
    # Round trip through calibration.json's reader (common practice for a file format: what the
    # writer wrote, the typed reader gives back, value for value)
    from pqflow.storage.calibration_file import calibration_record

    cal = demo_calibration
    written = cal.to_json()
    rec = calibration_record(written, "demo/calibration.json")
    paths, esr = written["expected_short_rate"], rec.expected_short_rate
    assert esr is not None and esr.target is not None
    assert esr.time == tuple(paths["time"]) and esr.real_world == tuple(paths["real_world"])
    assert esr.market_consistent == tuple(paths["market_consistent"])
    target = paths["target"]
    assert esr.target.quantity == target["quantity"] == "short_rate"
    assert esr.target.time == tuple(target["time"]) and esr.target.house_view == tuple(target["house_view"])
    assert esr.target.real_world == tuple(target["real_world"])
    assert esr.target.market_consistent == tuple(target["market_consistent"])
    view, stored_view = rec.real_world_view, written["parameters"]["real_world_view"]
    assert (view.kind, view.target, view.target_maturity) == ("path", stored_view["target"], None)
    mpr, stored_mpr = rec.market_prices_of_risk, written["parameters"]["market_prices_of_risk"]
    assert mpr is not None and mpr.rates == stored_mpr["rates"] == rec.rates_price_of_risk
    assert mpr.equity == stored_mpr["equity"] == rec.core_index.market_price_of_risk
    assert mpr.note == stored_mpr["note"]
    # the calibration swaptions and index options, field by field as written
    stored_sw, stored_eq = written["instruments"]["swaptions"], written["instruments"]["equity_options"]
    assert len(rec.swaptions) == len(stored_sw) > 0 and len(rec.equity_options) == len(stored_eq) > 0
    for got, raw in zip(rec.swaptions, stored_sw, strict=True):
        assert (got.expiry, got.tenor, got.strike, got.convention, got.shift) == (
            raw["expiry"], raw["tenor"], raw["strike"], raw["convention"], raw["shift"])
        assert (got.market_vol, got.market_price, got.model_price, got.weight) == (
            raw["market_vol"], raw["market_price"], raw["model_price"], raw["weight"])
        assert got.kind == raw.get("kind", "payer")
    for got, raw in zip(rec.equity_options, stored_eq, strict=True):
        assert (got.expiry, got.strike, got.index, got.kind, got.column_kind) == (
            raw["expiry"], raw["strike"], raw["index"], raw["kind"], raw["column_kind"])
        assert (got.market_vol, got.market_price, got.model_price) == (
            raw["market_vol"], raw["market_price"], raw["model_price"])
        assert got.convention == raw.get("convention", "lognormal")


def test_real_world_expected_short_rate_meets_the_house_view(demo_calibration):
    cal = demo_calibration
    path = cal.expected_paths()["target"]
    # Closed form: exact at every month end, so at every whole year.
    assert np.allclose(path["real_world"], path["house_view"], atol=1e-12)
    # Start: today's short rate f(0,0); long-run level approached with a 10-year half-life.
    view = cal.real_world_view
    assert path["house_view"][10] - view["long_run_level"] == pytest.approx(
        0.5 * (view["start"] - view["long_run_level"]), rel=1e-12
    )
    # By simulation, within 4 standard errors (no antithetic, 4,000 paths, annual steps).
    model = build_model(cal, (10.0,))
    times = time_grid(30, 1)
    out = simulate_batch(model, times, measure="real_world", n_paths=4000,
                         rng=batch_generator(11, "real_world", 0), antithetic=False)
    r = out["short_rate"]
    se = r.std(axis=0, ddof=1) / np.sqrt(r.shape[0])
    for k in (1, 5, 10, 20, 30):
        assert abs(r[:, k].mean() - path["house_view"][k]) <= 4 * se[k]
    # Under Q the same paths with the density reproduce the market-consistent mean.
    from pqflow.measure import expected_short_rate

    q_mean = expected_short_rate(cal.curve, cal.rates, cal.prices_of_risk, times, measure="market_consistent")
    w = out["q_density"]
    for k in (5, 20):
        x = w[:, k] * r[:, k]
        assert abs(x.mean() - q_mean[k]) <= 4 * x.std(ddof=1) / np.sqrt(x.size)


def test_zero_yield_target(tmp_path):
    # A house view on the 10-year zero yield instead of the short rate.
    data = _typed_rates(tomllib.loads(DEMO.read_text()))
    data["real_world"].update({"target": "zero_yield", "target_maturity": 10})
    cfg_path = _copy_demo(tmp_path, data)
    cal = assemble_calibration(load_config(cfg_path))
    path = cal.expected_paths()["target"]
    assert np.allclose(path["real_world"], path["house_view"], atol=1e-12)
    model = build_model(cal, (10.0,))
    out = simulate_batch(model, time_grid(20, 1), measure="real_world", n_paths=4000,
                         rng=batch_generator(3, "real_world", 0), antithetic=False)
    y = -np.log(out["zcb_10y"]) / 10.0
    se = y.std(axis=0, ddof=1) / np.sqrt(y.shape[0])
    for k in (5, 10, 20):
        assert abs(y[:, k].mean() - path["house_view"][k]) <= 4 * se[k]


def test_stored_calibration_round_trips(demo_calibration, tmp_path):
    write_calibration(tmp_path, demo_calibration)
    again = load_calibration(tmp_path / "calibration.json")
    assert again.to_json() == demo_calibration.to_json()
    t = np.linspace(0, 80, 17)
    assert np.array_equal(again.curve.discount(t), demo_calibration.curve.discount(t))


def _typed_rates(data: dict) -> dict:
    """The demo with Hull-White typed in (skips the swaption fit where a test does not need it)."""
    data = copy.deepcopy(data)
    del data["market_data"]["swaptions"]
    data["hull_white"] = {"mean_reversion": 0.03, "volatility": 0.0086}
    return data


def _core_only(data: dict) -> dict:
    """The demo with rates and the core equity only (no further indices, inflation or credit)."""
    data = copy.deepcopy(data)
    for key in ("indices", "inflation", "credit"):
        data.pop(key, None)
    for key in ("inflation_swaps", "inflation_caps", "credit_spreads"):
        data["market_data"].pop(key, None)
    return data


def _copy_demo(tmp_path: Path, data: dict, replace: dict[str, str] | None = None) -> Path:
    src = DEMO.parent / "market_data" / "veldmark_2026q3"
    dst = tmp_path / "market_data" / "veldmark_2026q3"
    shutil.copytree(src, dst)
    for name, text in (replace or {}).items():
        (dst / name).write_text(text)
    return write_toml(tmp_path / "quarter.toml", data)


_BAD_FILES = [
    ("swaptions.csv", "expiry_years,tenor_years,normal_vol_bp\n1,5,NaN\n",
     "data row 1 (line 2), column 'normal_vol_bp'"),
    ("swaptions.csv", "expiry_years,tenor_years,normal_vol_bp\n1,5,0.0085\n", "basis points"),
    ("curve.csv", "maturity_years,par_rate\n1,0.02\n3,0.025\n2,0.03\n", "strictly increasing"),
    ("curve.csv", "maturity_years,par_rate\n1,0.02\n2,\n", "missing value"),
    ("equity_vols.csv", "index,expiry_years,implied_vol\nveldmark_all_share,1,-0.2\n", "column 'implied_vol'"),
    ("equity_index.csv", "index,spot_level,dividend_yield\nveldmark_all_share,-5,0.02\n", "must be positive"),
    ("correlations.csv", "driver,rates,veldmark_all_share\nrates,1,-0.2\nveldmark_all_share,-0.1,1\n", "symmetric"),
    ("correlations.csv", "driver,rates,veldmark_all_share\nrates,1,1.3\nveldmark_all_share,1.3,1\n", "outside [-1, 1]"),
]


@pytest.mark.parametrize(("name", "text", "fragment"), _BAD_FILES)
def test_bad_market_data_gives_clear_error_and_writes_nothing(tmp_path, name, text, fragment):
    cfg = _copy_demo(tmp_path, tomllib.loads(DEMO.read_text()), {name: text})
    out = tmp_path / "calibration.json"
    result = CliRunner().invoke(app, ["calibrate", str(cfg), "--out", str(out)])
    assert result.exit_code == 2, result.output
    message = " ".join(result.output.split())
    assert name in message and fragment in message
    assert not out.exists()


_NOT_PSD = (
    "driver,rates,veldmark_all_share,property\n"
    "rates,1,0.9,-0.9\nveldmark_all_share,0.9,1,0.9\nproperty,-0.9,0.9,1\n"
)


def test_non_psd_correlation_rejected_or_repaired(tmp_path):
    data = _core_only(_typed_rates(tomllib.loads(DEMO.read_text())))
    cfg = _copy_demo(tmp_path / "a", copy.deepcopy(data), {"correlations.csv": _NOT_PSD})
    with pytest.raises(MarketDataError, match="higham"):
        assemble_calibration(load_config(cfg))
    data["calibration"]["correlation_repair"] = "higham"
    cfg = _copy_demo(tmp_path / "b", data, {"correlations.csv": _NOT_PSD})
    cal = assemble_calibration(load_config(cfg))
    fit = cal.fit["correlation"]
    assert fit["repaired"] and fit["frobenius_distance"] > 0
    repaired = np.array(fit["repaired_matrix"])
    assert np.linalg.eigvalsh(repaired).min() >= -1e-10  # positive semi-definite (its definition)
    assert cal.core_index.correlation == pytest.approx(repaired[0, 1])


def test_equity_vol_below_rate_variance_is_a_calibration_error(tmp_path):
    # An implied vol so low that the rates' own variance already exceeds it cannot be fitted.
    text = "index,expiry_years,implied_vol\nveldmark_all_share,1,0.18\nveldmark_all_share,30,0.02\n"
    data = _typed_rates(tomllib.loads(DEMO.read_text()))
    cfg = _copy_demo(tmp_path, data, {"equity_vols.csv": text})
    with pytest.raises(CalibrationError, match="equity_vols.csv"):
        assemble_calibration(load_config(cfg))
