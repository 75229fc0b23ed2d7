"""Smile market data, the ``volatility_model`` switch and the Heston fit in a run's calibration.

Sources: the recovery check generates quotes from known parameters with the characteristic
function checked against QuantLib in ``tests/test_heston_pricing.py`` (common practice for a
calibration); the file rules are pqflow's own (README, "Market-data files").
"""

from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest
from conftest import DEMO, write_toml
from typer.testing import CliRunner

from pqflow.calibration import assemble_calibration, build_model, load_calibration
from pqflow.calibration.formulas import black_implied_vol
from pqflow.cli import app
from pqflow.config import load_config
from pqflow.errors import CalibrationError, ConfigError, MarketDataError
from pqflow.market.data_files import read_equity_vols
from pqflow.models.heston import HestonParams, heston_option_price

__all__: list[str] = []

SMILE_DEMO = DEMO.parent / "demo_smile.toml"


def _write(tmp_path, text: str):
    p = tmp_path / "vols.csv"
    p.write_text(text)
    return p


def test_reader_smile_rows_moneyness_and_weights(tmp_path) -> None:
    rows = read_equity_vols(_write(tmp_path, "index,expiry_years,implied_vol,strike,weight\n"
                                   "a,1,0.25,0.8,2\na,1,0.2,ATMF,1\na,1,0.18,1.2,0\na,2,0.21,ATMF,1\n"))
    assert [r.moneyness for r in rows] == [0.8, None, 1.2, None]
    assert [r.weight for r in rows] == [2.0, 1.0, 0.0, 1.0]
    assert rows[1].is_atmf and not rows[0].is_atmf
    # the old at-the-money format still reads
    old = read_equity_vols(_write(tmp_path, "index,expiry_years,implied_vol\na,1,0.2\na,2,0.21\n"))
    assert [r.moneyness for r in old] == [None, None] and old[0].weight == 1.0


@pytest.mark.parametrize(("text", "fragment"), [
    ("index,expiry_years,implied_vol,strike\na,1,0.2,950\n", "moneyness K/F"),
    ("index,expiry_years,implied_vol,strike\na,1,0.2,ATMF\na,1,0.21,1\n", "second quote"),
    ("index,expiry_years,implied_vol,strike\na,2,0.2,ATMF\na,1,0.21,0.9\n", "must not decrease"),
    ("index,expiry_years,implied_vol,strike,weight\na,1,0.2,ATMF,-1\n", "column 'weight'"),
])
def test_reader_refuses_bad_smile_rows(tmp_path, text, fragment) -> None:
    with pytest.raises(MarketDataError, match=fragment):
        read_equity_vols(_write(tmp_path, text))


def _smile_text(cal, p: HestonParams, expiries=(1.0, 3.0, 7.0), moneyness=(0.8, 1.0, 1.25)) -> str:
    lines = ["index,expiry_years,implied_vol,strike,weight"]
    eq = cal.core_index
    for t in expiries:
        df = float(cal.curve.discount(t))
        f = eq.level * np.exp(-eq.income_yield * t) / df
        for m in moneyness:
            kind = "call" if m >= 1 else "put"
            pr = float(heston_option_price(p, level=eq.level, dividend_yield=eq.income_yield, discount=df, expiry=t,
                                           strike=m * f, kind=kind, rates=cal.rates, correlation=eq.correlation))
            v = float(black_implied_vol(pr, f, m * f, t, annuity=df, kind=kind))
            lines.append(f"{eq.name},{t:g},{v:.12f},{'ATMF' if m == 1.0 else m},1")
    world = [ln for ln in (DEMO.parent / "market_data/veldmark_2026q3/equity_vols.csv").read_text().splitlines()
             if ln.startswith("world_equity")]
    return "\n".join(lines + [w + ",1" for w in world]) + "\n"


def test_heston_index_calibrates_and_round_trips(tmp_path) -> None:
    """Recovery of known parameters through the whole calibration (files, rates, correlation)
    and the calibration.json round trip."""
    base = assemble_calibration(load_config(DEMO))
    true = HestonParams(v0=0.03, kappa=1.3, theta=0.045, xi=0.5, rho=-0.5)
    data = tomllib.loads(SMILE_DEMO.read_text())
    import shutil
    shutil.copytree(DEMO.parent / "market_data", tmp_path / "market_data")
    (tmp_path / "market_data/veldmark_2026q3/equity_smile.csv").write_text(_smile_text(base, true))
    cfg_path = write_toml(tmp_path / "smile.toml", data)
    out = tmp_path / "calibration.json"
    result = CliRunner().invoke(app, ["calibrate", str(cfg_path), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "Feller ratio" in result.output and "smile fit" in result.output
    payload = json.loads(out.read_text())
    got = payload["parameters"]["stochastic_volatility"]["veldmark_all_share"]
    for k, v in true.as_dict().items():
        assert abs(got[k] - v) < 1e-4 * max(1.0, abs(v)), k
    fit = payload["fit"]["heston"]["veldmark_all_share"]
    assert fit["rmse_vol_points"] < 1e-3 and len(fit["rows"]) == 9
    assert "H1-HW" in fit["method"]  # the demo's equity correlates with rates
    cal = load_calibration(out)
    assert cal.stochastic_volatility["veldmark_all_share"].params.as_dict() == {k: got[k] for k in true.as_dict()}
    assert cal.to_json()["parameters"]["stochastic_volatility"] == payload["parameters"]["stochastic_volatility"]
    # every smile quote is an instrument the market-consistency check reprices
    opts = [o for o in payload["instruments"]["equity_options"] if o["index"] == "veldmark_all_share"]
    assert len(opts) == 9 and {o["kind"] for o in opts} == {"call", "put"}
    build_model(cal, (1.0,))  # simulates (its Gaussian stand-in takes the implied price of risk)
    # a stored Heston calibration does not serve a configuration without the Heston index
    from pqflow.calibration.assemble import check_calibration_fits

    plain = tomllib.loads(SMILE_DEMO.read_text())
    plain["equity"]["volatility_model"] = "deterministic"
    with pytest.raises(ConfigError, match="Heston indices"):
        check_calibration_fits(cal, load_config(write_toml(tmp_path / "plain.toml", plain)), source="calibration.json")


def test_volatility_model_rules(tmp_path) -> None:
    data = tomllib.loads(DEMO.read_text())
    data["equity"]["volatility_model"] = "heston"
    data["equity"]["volatility"] = 0.2
    del data["market_data"]["equity_vols"]
    with pytest.raises(ConfigError, match="volatility_model"):
        load_config(write_toml(tmp_path / "a.toml", data))
    data = tomllib.loads(DEMO.read_text())
    data["calibration"]["heston"] = {"rho_bounds": [-1.5, 0.5]}
    with pytest.raises(ConfigError, match="rho_bounds"):
        load_config(write_toml(tmp_path / "b.toml", data))
    data["calibration"]["heston"] = {"initial": {"kappa": 20.0}}
    with pytest.raises(ConfigError, match="initial kappa"):
        load_config(write_toml(tmp_path / "c.toml", data))


def test_deterministic_index_uses_the_atmf_row_of_a_smile(tmp_path) -> None:
    """A smile file under a deterministic index: the same fit as the ATMF-only file; an expiry
    with several strikes and no ATMF row is refused with the file and rows named."""
    import shutil
    shutil.copytree(DEMO.parent / "market_data", tmp_path / "market_data")
    data = tomllib.loads(DEMO.read_text())
    data["market_data"]["equity_vols"] = "market_data/veldmark_2026q3/equity_smile.csv"
    cal = assemble_calibration(load_config(write_toml(tmp_path / "d.toml", data)))
    assert cal.fit["equity"]["bucket_ends"] == [0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0]
    atm = [r for r in read_equity_vols(tmp_path / "market_data/veldmark_2026q3/equity_smile.csv")
           if r.index == "veldmark_all_share" and r.is_atmf]
    assert [r["market_vol"] for r in cal.fit["equity"]["rows"]] == [r.implied_vol for r in atm]
    smile = tmp_path / "market_data/veldmark_2026q3/equity_smile.csv"
    smile.write_text("\n".join(ln for ln in smile.read_text().splitlines() if not ln.endswith(",ATMF,1")
                               or ln.startswith("world")) + "\n")
    with pytest.raises(CalibrationError, match="none at the money forward"):
        assemble_calibration(load_config(write_toml(tmp_path / "e.toml", data)))


def test_demo_smile_is_labelled_invented_and_loads() -> None:
    text = SMILE_DEMO.read_text()
    assert "INVENTED DATA" in text
    cfg = load_config(SMILE_DEMO)
    assert cfg.equity.volatility_model == "heston"
    assert load_config(DEMO).equity.volatility_model == "deterministic"
