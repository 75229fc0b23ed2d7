"""The evidence checks on the parts beside rates and the core equity: further indices,
inflation (Jarrow-Yildirim) and credit (CIR++, recovery of market value).

Runs: the demo configuration (``scenario_configs/demo.toml``, its invented market-data files)
made small (1,000 scenarios per set, 15 years, annual), written by the library steps without
Prefect, and the same without ``[inflation]`` and ``[credit]``.

References used below (each named again beside its check):
- Martingale ("1 = 1") test, one cell per asset and time, and repricing the calibration
  instruments from the files: Society of Actuaries, *Economic Scenario Generators: A Practical
  Guide*, 2016, s. 8.3.
- CPI and real bonds: ``E_Q[I_t / B_t] = I_0 P_r(0, t)``, ``E_Q[I_t P_r(t, t+m) / B_t] = I_0
  P_r(0, t+m)``, and the real curve from zero-coupon inflation swaps ``P_r(0, T) = P_n(0, T)
  (1 + k(T))^T`` (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed.,
  2006, ch. 15.1-15.2).
- Defaultable bonds under recovery of market value: the pre-default price discounted at
  ``r + L lambda`` is a Q-martingale (Duffie and Singleton, *Review of Financial Studies* 12,
  1999), so ``E_Q[exp(-L Lambda_t) Dbar(t, t+m) / B_t] = P(0, t+m) exp(-s(0, t+m) (t+m))``
  with ``s`` the zero-coupon spread (continuously compounded; its definition).
- Equity options: Black (1976) on the forward ``S_0 e^{-qT} / P(0, T)`` (the quote convention;
  Hull, *Options, Futures and Other Derivatives*), ``q`` the index's income yield from the
  market-data file.
- Risk premium: with ``lambda = RP / sigma`` (Girsanov), ``E_P[S_t / (S_0 B_t)] = e^{RP t}``
  exactly (Brigo and Mercurio 2006, ch. 3; common practice).
Monte Carlo tolerances are the checks' own family-wise rule (Bonferroni, family level 99%) at
the demo's fixed seed.
"""

from __future__ import annotations

import csv
import shutil
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import DEMO
from test_validation_checks import _rewrite_parts

from pqflow.config.loader import load_config, parse_config
from pqflow.errors import IntegrityError
from pqflow.jobs.steps import calibrate_step, generate_part, plan_run
from pqflow.storage.jsonio import read_json, write_json_atomic
from pqflow.validation.evidence import RunValidation, run_checks
from pqflow.validation.run_files import load_run_inputs
from pqflow.validation.summary import family_critical_z

MARKET = DEMO.parent / "market_data" / "veldmark_2026q3"
SCENARIOS, HORIZON = 1000, 15
RATINGS = ("AA", "BBB")
REAL_BONDS = (5.0, 10.0, 20.0)
CREDIT_BONDS = (1.0, 3.0, 5.0, 10.0)


def _csv_rows(name: str) -> list[dict[str, str]]:
    with open(MARKET / name, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _demo_data() -> dict[str, Any]:
    cfg = load_config(DEMO)
    data = cfg.model_dump(mode="json", exclude_none=True)
    data["simulation"].update(scenarios=SCENARIOS, batch_size=SCENARIOS // 4, horizon_years=HORIZON)
    return data


def _build(root: Path, data: dict[str, Any]) -> Path:
    """Calibrate, plan and write every part of a run with the library steps (no Prefect)."""
    cfg = parse_config(data, source=f"{DEMO} (made small for tests)", base_dir=DEMO.parent)
    root.mkdir(parents=True)
    cal = calibrate_step(cfg, root)
    plan = plan_run(cfg)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, root)
    return root


@pytest.fixture(scope="module")
def full_run(tmp_path_factory) -> Path:
    return _build(tmp_path_factory.mktemp("parts") / "full", _demo_data())


@pytest.fixture(scope="module")
def full_checks(full_run) -> RunValidation:
    return run_checks(full_run, ess_warning_share=0.10)


@pytest.fixture(scope="module")
def plain_run(tmp_path_factory) -> Path:
    data = _demo_data()
    data.pop("inflation")
    data.pop("credit")
    data["market_data"].pop("inflation_swaps")
    data["market_data"].pop("inflation_caps")
    data["market_data"].pop("credit_spreads")
    return _build(tmp_path_factory.mktemp("parts") / "plain", data)


def _copy(run: Path, tmp_path: Path) -> Path:
    out = tmp_path / "defect"
    shutil.copytree(run, out)
    return out


def _new_assets() -> list[str]:
    out = ["property_veldmark_property", "equity_world_equity", "cpi"]
    out += [f"real_zcb_{m:g}y" for m in REAL_BONDS]
    for r in RATINGS:
        out += [f"cumulative_intensity_{r}", *(f"dzcb_{r}_{m:g}y" for m in CREDIT_BONDS)]
    return out


# -- (a) every new asset is tested in both sets and passes --------------------------------------

def test_every_new_asset_is_in_both_martingale_tables_and_passes(full_checks):
    checks = full_checks.summary["checks"]
    for measure, table in full_checks.martingale.items():
        entry = checks[f"martingale_{measure}"]
        # SOA 2016 s. 8.3: each asset within its interval at every date; family-wise
        # (Bonferroni, 99%) over every cell of the set. With 500 antithetic pairs the cells
        # that cannot see a 5% deviation are inconclusive, not passed (validation.summary).
        assert entry["verdict"] in ("pass", "inconclusive"), (measure, entry["worst_cell"])
        crit = family_critical_z(len(table))
        assert crit == pytest.approx(entry["family_critical_z"])
        for asset in _new_assets():
            rows = table[table["asset"] == asset]
            assert len(rows) == HORIZON, (measure, asset)  # one cell per output time t > 0
            assert rows["z_score"].abs().max() <= crit, (measure, asset, rows["z_score"].abs().max())
            assert np.all(rows["std_error"] > 0)


def test_references_come_from_the_market_inputs(full_run, full_checks):
    """Expected values of the new cells at the market-data pillars, computed here from the CSV
    files and today's nominal curve (not from the validation code)."""
    curve = load_run_inputs(full_run).curve
    table = full_checks.martingale["market_consistent"]
    # Brigo and Mercurio 2006, ch. 15.2: P_r(0, T) = P_n(0, T) (1 + k(T))^T at each swap;
    # ch. 15.1: E_Q[I_t / B_t] = I_0 P_r(0, t), I_0 = cpi_base = 100 (demo.toml).
    swaps = {float(r["maturity_years"]): float(r["zc_rate"]) for r in _csv_rows("inflation_swaps.csv")}
    for t, k in swaps.items():
        if t > HORIZON:
            continue
        row = table[(table["asset"] == "cpi") & (table["time"] == t)]
        assert float(row["expected"].iloc[0]) == pytest.approx(100.0 * curve.discount(t) * (1 + k) ** t, rel=1e-10)
    row = table[(table["asset"] == "real_zcb_5y") & (table["time"] == 5.0)]  # matures at the 10y swap
    assert float(row["expected"].iloc[0]) == pytest.approx(100.0 * curve.discount(10.0) * (1 + swaps[10.0]) ** 10,
                                                           rel=1e-10)
    # Duffie and Singleton 1999 (recovery of market value): E_Q[exp(-L Lambda_t) Dbar(t, t+m) / B_t]
    # = P(0, t+m) exp(-s(0, t+m) (t+m)), s the quoted zero spread at a pillar.
    spreads = {(r["rating"], float(r["maturity_years"])): float(r["spread_bp"]) * 1e-4
               for r in _csv_rows("credit_spreads.csv")}
    for (rating, pillar), s in spreads.items():
        for m in (0.0, *CREDIT_BONDS):
            t = pillar - m
            if t <= 0:
                continue
            asset = f"cumulative_intensity_{rating}" if m == 0.0 else f"dzcb_{rating}_{m:g}y"
            row = table[(table["asset"] == asset) & (table["time"] == t)]
            assert len(row) == 1, (asset, t)
            assert float(row["expected"].iloc[0]) == pytest.approx(
                curve.discount(pillar) * np.exp(-s * pillar), rel=1e-10), (asset, t)


# -- (b) planted defects fail the martingale test ------------------------------------------------

def test_martingale_catches_a_drift_in_the_cpi(full_run, tmp_path):
    bad = _copy(full_run, tmp_path)
    # Brigo and Mercurio 2006, ch. 15.1: E_Q[I_t / B_t] = I_0 P_r(0, t); an extra 1% a year of
    # CPI growth breaks it (and the real bonds' currency prices, cpi x real_zcb) (SOA 2016 s. 8.3).
    _rewrite_parts(bad, "market_consistent", "cpi", lambda v, t: v * np.exp(0.01 * t))
    result = run_checks(bad, ess_warning_share=0.10)
    entry = result.summary["checks"]["martingale_market_consistent"]
    assert entry["verdict"] == "fail"
    assert entry["worst_cell"]["asset"] in ("cpi", *(f"real_zcb_{m:g}y" for m in REAL_BONDS))
    table = result.martingale["market_consistent"]
    crit = entry["family_critical_z"]
    assert (table[table["asset"] == "cpi"]["z_score"].abs() > crit).any()
    assert (table[table["asset"].isin(["deflator",
                                       "zcb_10y"])]["z_score"].abs() <= crit).all()  # only the CPI's claims fail
    assert result.summary["checks"]["martingale_real_world"]["verdict"] != "fail"  # the P set is untouched
    assert result.summary["verdict"] == "fail"


def test_martingale_catches_a_mispriced_defaultable_bond(full_run, tmp_path):
    bad = _copy(full_run, tmp_path)
    # Duffie and Singleton 1999: exp(-L Lambda_t) Dbar(t, t+m) / B_t is a Q-martingale; a 2% error
    # in the pre-default price breaks it (SOA 2016 s. 8.3).
    _rewrite_parts(bad, "market_consistent", "dzcb_BBB_5y", lambda v, t: np.where(t > 0, 1.02 * v, v))
    result = run_checks(bad, ess_warning_share=0.10)
    entry = result.summary["checks"]["martingale_market_consistent"]
    assert entry["verdict"] == "fail"
    assert entry["worst_cell"]["asset"] == "dzcb_BBB_5y"
    table = result.martingale["market_consistent"]
    others = table[table["asset"].str.startswith(("dzcb_",
                                                  "cumulative_intensity_")) & (table["asset"] != "dzcb_BBB_5y")]
    assert (others["z_score"].abs() <= entry["family_critical_z"]).all()


def test_calibration_without_the_part_its_columns_need_is_an_error(full_run, tmp_path):
    # Files carrying cpi with no inflation parameters to test them against: refused, not skipped
    # (a test that silently does not run cannot fail; common practice).
    bad = _copy(full_run, tmp_path)
    stored = read_json(bad / "calibration.json")
    del stored["parameters"]["inflation"]
    write_json_atomic(bad / "calibration.json", stored)
    with pytest.raises(IntegrityError, match="parameters.inflation"):
        run_checks(bad, ess_warning_share=0.10)


# -- (c) options on the further index are repriced ------------------------------------------------

def test_world_equity_options_are_repriced_in_both_sets(full_run, full_checks):
    from scipy.stats import norm

    entry = full_checks.summary["checks"]["market_consistency"]
    assert entry["verdict"] in ("pass", "inconclusive")  # no cell fails; weak cells are inconclusive
    assert not [u for u in entry["not_testable"] if "world_equity" in u["instrument"]]
    table = full_checks.tables["market_consistency"]
    rows = table[table["instrument"].str.contains("world_equity")]
    stored = read_json(full_run / "calibration.json")["instruments"]["equity_options"]
    quotes = [q for q in stored if q.get("index") == "world_equity"]
    assert quotes and len(rows) == 2 * len(quotes)  # every quote, both sets
    crit = entry["family_critical_z"]
    # SOA 2016 s. 8.3: Monte Carlo prices from the files against the market quotes (within the
    # stated vol tolerance) and against the calibrated model's price, in standard errors.
    assert (rows["z_score"].abs() <= crit).all()
    assert (rows["z_model"].abs() <= crit).all()
    # The market price the check uses is Black (1976) on the forward S_0 e^{-qT} / P(0, T) with
    # q the index's own yield from equity_index.csv (not the core equity's 2.8%).
    index = {r["index"]: r for r in _csv_rows("equity_index.csv")}["world_equity"]
    s0, q = float(index["spot_level"]), float(index["dividend_yield"])
    curve = load_run_inputs(full_run).curve
    for r in rows.itertuples(index=False):
        df = float(curve.discount(r.expiry))
        f = s0 * np.exp(-q * r.expiry) / df
        sd = r.market_vol * np.sqrt(r.expiry)
        d1 = np.log(f / r.strike) / sd + 0.5 * sd
        black = df * (f * norm.cdf(d1) - r.strike * norm.cdf(d1 - sd))
        assert r.market_price == pytest.approx(black, rel=1e-9)


# -- (d) per-index risk premia --------------------------------------------------------------------

def _premium_rows(targets, column: str):
    return targets[targets["target"].str.startswith(f"risk premium of {column}")]


def test_risk_premium_rows_for_each_further_index(full_checks, full_run, tmp_path):
    with open(DEMO, "rb") as fh:
        indices = {i["name"]: i for i in tomllib.load(fh)["indices"]}
    entry = full_checks.summary["checks"]["real_world"]
    assert entry["verdict"] in ("pass", "inconclusive")  # no cell fails (checked per row below)
    targets = full_checks.tables["real_world_targets"]
    for column, name in (("equity_world_equity", "world_equity"), ("property_veldmark_property", "veldmark_property")):
        rows = _premium_rows(targets, column)
        assert len(rows) == HORIZON, column  # every output time t > 0
        # Girsanov with lambda = RP / sigma: E_P[S_t / (S_0 B_t)] = e^{RP t} exactly, RP as
        # configured in demo.toml; family-wise at 99% (Bonferroni).
        assert np.all(rows["expected"] == indices[name]["risk_premium"])
        assert (rows["z_score"].abs() <= entry["family_critical_z"]).all(), column

    # The rows can fail: 1% a year more growth of the property index in the P set.
    bad = _copy(full_run, tmp_path)
    _rewrite_parts(bad, "real_world", "property_veldmark_property", lambda v, t: v * np.exp(0.01 * t))
    result = run_checks(bad, ess_warning_share=0.10)
    bad_entry = result.summary["checks"]["real_world"]
    assert bad_entry["verdict"] == "fail"
    assert bad_entry["worst_cell"]["target"].startswith("risk premium of property_veldmark_property")
    good = _premium_rows(result.tables["real_world_targets"], "equity_world_equity")
    assert (good["z_score"].abs() <= bad_entry["family_critical_z"]).all()


def test_expected_returns_include_property_and_cpi(full_checks):
    table = full_checks.tables["expected_returns"]
    assets = set(table["asset"])
    assert {"property_veldmark_property", "equity_world_equity", "cpi"} <= assets
    cpi = table[table["asset"] == "cpi"]
    assert cpi["description"].str.contains("consumer price index").all()
    # Under Q, E[I_h] / I_0 with a deterministic real rate would be P_r(0,h) / P_n(0,h)
    # (Brigo and Mercurio 2006, ch. 15.2: the zero-coupon swap's fair rate is expected
    # inflation under the h-forward measure); the simulated Q-expectation lies within 50 bp a
    # year of the 10-year breakeven, 2.11% (inflation_swaps.csv), the gap being the rates'
    # covariance (a loose plausibility bound, common practice).
    k10 = float(cpi[cpi["horizon"] == 10.0]["market_consistent"].iloc[0])
    assert abs(k10 - np.log1p(0.0211)) < 0.005


# -- (e) a run without inflation or credit ---------------------------------------------------------

def test_a_run_without_inflation_or_credit_has_no_such_rows(plain_run):
    result = run_checks(plain_run, ess_warning_share=0.10)
    assert result.summary["verdict"] in ("pass", "inconclusive")
    assert all(c["verdict"] != "fail" for c in result.summary["checks"].values())
    for measure, table in result.martingale.items():
        assets = set(table["asset"])
        assert not {a for a in assets if a == "cpi" or a.startswith(("real_zcb_", "dzcb_", "cumulative_intensity_"))}
        assert {"property_veldmark_property", "equity_world_equity"} <= assets, measure  # indices still tested
    assert "cpi" not in set(result.tables["expected_returns"]["asset"])
    assert len(_premium_rows(result.tables["real_world_targets"], "property_veldmark_property")) == HORIZON
