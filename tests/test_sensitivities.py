"""Sensitivity and stress sets: shocked market data, one set per sensitivity on the base run's
seeds (common random numbers), and the valuation's changes with their standard errors.

Sources named beside each check:
- Zero-coupon bond under a parallel shift of continuously compounded zero rates:
  ``P'(0, T) = P(0, T) e^{-s T}`` (definition of the zero rate; common practice). Under
  Hull-White with unchanged ``(a, sigma)`` the bank account on the same normals moves by the same
  deterministic factor, ``B'_T = B_T P(0, T) / P'(0, T)`` (Brigo and Mercurio, *Interest Rate
  Models*, 2006, s. 3.3: ``int_0^T r = int_0^T x + ln(P(0,0)/P(0,T)) + deterministic variance
  terms``), so the set's bond value changes by exactly that closed form path by path.
- Variance of a difference of paired means versus independent means, ``Var(d) = Var(a) + Var(b)
  - 2 Cov(a, b)`` (common random numbers: Glasserman, *Monte Carlo Methods in Financial
  Engineering*, 2003, s. 4.2).
"""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from conftest import REPO, write_toml

from pqflow.calibration.assemble import load_calibration
from pqflow.config.loader import load_config
from pqflow.errors import ConfigError, MarketDataError
from pqflow.liabilities import value_liabilities_cli
from pqflow.storage.manifest import verify_run

BOOK = REPO / "scenario_configs" / "demo_liabilities.toml"
PILLARS = [1.0, 10.0, 30.0, 50.0, 70.0]
ZEROS = [0.025, 0.028, 0.031, 0.032, 0.033]

BASE: dict[str, Any] = {
    "run": {"name": "sensitivities", "valuation_date": "2026-09-30"},
    "curve": {"kind": "zero_rates", "compounding": "continuous", "maturities": PILLARS, "values": ZEROS},
    "hull_white": {"mean_reversion": 0.05, "volatility": 0.009},
    "equity": {"name": "veldmark_all_share", "level": 1000.0, "dividend_yield": 0.028,
               "volatility": 0.17, "correlation_with_rates": -0.15},
    "real_world": {"rates_market_price_of_risk": 0.1, "equity_risk_premium": 0.035},
    "simulation": {"scenarios": 400, "horizon_years": 25, "steps_per_year": 1, "seed": 3,
                   "batch_size": 200, "antithetic": True},
    "outputs": {"bond_maturities": [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 15, 20, 25, 30]},
    "sensitivities": [
        {"name": "rates_up_100bp", "curve_shift_bp": 100.0, "keep_volatility_parameters": True},
        {"name": "equity_down", "index_level_shift_pct": -30.0},
        {"name": "equity_vol_up", "equity_vol_shift_points": 2.0},
    ],
}


def _write(root: Path, data: dict[str, Any]) -> Path:
    root.mkdir(parents=True, exist_ok=True)
    return write_toml(root / "run.toml", copy.deepcopy(data))


@pytest.fixture(scope="module")
def run(tmp_path_factory) -> Path:
    from pqflow.pipeline.flows import run_in_process

    root = tmp_path_factory.mktemp("sens")
    out = root / "run"
    result = run_in_process(_write(root, BASE), out)
    assert result["summary"]["verdict"] in ("pass", "inconclusive"), result["summary"].get("sensitivities")
    return out


def test_layout_manifest_and_checks(run):
    manifest = verify_run(run)  # every file of every sensitivity matches the manifest
    assert [s["name"] for s in manifest["sensitivities"]] == ["rates_up_100bp", "equity_down", "equity_vol_up"]
    paths = {f["path"] for f in manifest["files"]}
    for name in ("rates_up_100bp", "equity_down"):
        for rel in ("calibration.json", "validation/summary.json", "validation/martingale.csv",
                    "scenarios/market_consistent/part-00000.parquet", "scenarios/market_consistent/part-00001.parquet"):
            assert f"sensitivities/{name}/{rel}" in paths
        assert not (run / "sensitivities" / name / "scenarios" / "real_world").exists()  # real world: optional
        summary = json.loads((run / "sensitivities" / name / "validation" / "summary.json").read_text())
        assert summary["checks"]["martingale_market_consistent"]["verdict"] in ("pass", "inconclusive")
        assert summary["checks"]["reconciliation"]["verdict"] == "not_applicable"
    run_summary = json.loads((run / "validation" / "summary.json").read_text())
    assert set(run_summary["sensitivities"]) == {"rates_up_100bp", "equity_down", "equity_vol_up"}
    # the shocks reached the calibration: typed-in values shocked, volatility kept or not
    up = load_calibration(run / "sensitivities" / "rates_up_100bp" / "calibration.json")
    down = load_calibration(run / "sensitivities" / "equity_down" / "calibration.json")
    vol_up = load_calibration(run / "sensitivities" / "equity_vol_up" / "calibration.json")
    base = load_calibration(run / "calibration.json")
    assert up.curve.discount(10.0) == pytest.approx(base.curve.discount(10.0) * np.exp(-0.1), rel=1e-14)
    assert up.rates == base.rates and up.core_index.volatility == base.core_index.volatility
    assert down.core_index.level == pytest.approx(700.0) and down.core_index.volatility == pytest.approx(0.17)
    assert vol_up.core_index.level == pytest.approx(1000.0) and vol_up.core_index.volatility == pytest.approx(0.19)
    assert down.curve.discount(10.0) == base.curve.discount(10.0)


def test_curve_only_shift_moves_a_zero_coupon_bond_by_its_closed_form(run):
    """Common random numbers: the same normals, so the deflator at a pillar T moves by exactly
    P'(0,T)/P(0,T) = e^{-0.01 T} on every path (see the module docstring)."""
    for part in ("part-00000.parquet", "part-00001.parquet"):
        a = pq.read_table(run / "scenarios" / "market_consistent" / part).to_pandas()
        shocked = run / "sensitivities" / "rates_up_100bp"
        b = pq.read_table(shocked / "scenarios" / "market_consistent" / part).to_pandas()
        assert np.array_equal(a["scenario"], b["scenario"]) and np.array_equal(a["time"], b["time"])
        for T in (1.0, 10.0):
            ratio = b.loc[b.time == T, "deflator"].to_numpy() / a.loc[a.time == T, "deflator"].to_numpy()
            np.testing.assert_allclose(ratio, np.exp(-0.01 * T), rtol=1e-12)
    # the bond's value from the sets, E_Q[1/B_T], and its change against the closed form
    T = 10.0
    base_curve = load_calibration(run / "calibration.json").curve
    closed = float(base_curve.discount(T)) * (np.exp(-0.01 * T) - 1.0)
    def deflators(folder: Path) -> np.ndarray:
        frames = [pq.read_table(p).to_pandas() for p in sorted(folder.glob("*.parquet"))]
        return np.concatenate([f.loc[f["time"] == T, "deflator"].to_numpy() for f in frames])

    d_b = deflators(run / "scenarios" / "market_consistent")
    d_s = deflators(run / "sensitivities" / "rates_up_100bp" / "scenarios" / "market_consistent")
    units = lambda v: 0.5 * (v[0::2] + v[1::2])  # noqa: E731  antithetic pairs
    change = units(d_s) - units(d_b)
    se_paired = change.std(ddof=1) / np.sqrt(change.size)
    se_indep = np.hypot(units(d_s).std(ddof=1), units(d_b).std(ddof=1)) / np.sqrt(change.size)
    print(f"\nZCB {T:g}y: MC change {change.mean():.8f}, closed form {closed:.8f}, SE paired {se_paired:.2e}, "
          f"SE independent sets {se_indep:.2e}")
    assert abs(change.mean() - closed) <= 4.0 * se_paired + 1e-15
    assert se_paired <= se_indep / 3.0


def test_value_reports_every_sensitivity_with_paired_and_independent_se(run, tmp_path):
    summary = value_liabilities_cli(run, BOOK, tmp_path / "val")
    assert (tmp_path / "val" / "sensitivities.csv").is_file()
    table = pd.read_parquet(tmp_path / "val" / "sensitivities.parquet")
    assert set(table["sensitivity"]) == {"rates_up_100bp", "equity_down", "equity_vol_up"}
    assert {"best_estimate", "guarantee", "tvog"} <= set(table["quantity"])
    base_lines = pd.read_parquet(tmp_path / "val" / "liability_values.parquet")
    total = table[(table.level == "total")]
    # the base values are the valuation's own market-consistent values (same files, same projection)
    be_base = base_lines[(base_lines.level == "total") & (base_lines.quantity == "best_estimate")]
    # (the plain means: changes are paired differences of plain means; the base line's value with
    # control variates is reported beside it in liability_values)
    mc_col = "market_consistent_value_without_controls"
    for name in ("rates_up_100bp", "equity_down", "equity_vol_up"):
        row = total[(total.sensitivity == name) & (total.quantity == "best_estimate")].iloc[0]
        assert row.base_value == pytest.approx(float(be_base[mc_col].iloc[0]), rel=1e-12)
        assert row.change == pytest.approx(row.value - row.base_value, rel=1e-9, abs=1e-6)
        ratio = row.change_se_paired / row.change_se_independent
        print(f"\n{name}: BE change {row.change:,.0f} ± {row.change_se_paired:,.0f} (paired); "
              f"± {row.change_se_independent:,.0f} between independent sets; ratio {ratio:.3f}")
        # common random numbers: at most a third of the independent-sets SE (the issue's
        # criterion, measured at this seed)
        assert ratio <= 1.0 / 3.0
    ul = table[(table.line == "unit_linked_gmmb") & (table.quantity == "guarantee")].set_index("sensitivity")
    # more equity volatility raises the unit-linked maturity guarantee's cost, well beyond its SE
    assert ul.loc["equity_vol_up", "change"] > 5 * ul.loc["equity_vol_up", "change_se_paired"]
    # the products follow the fund's performance relative to time 0, so a level shock of the
    # index alone moves no liability value (on the same scenarios: exactly, up to rounding)
    eq = table[table.sensitivity == "equity_down"]
    assert np.all(np.abs(eq["change"]) <= 1e-9 * np.maximum(1.0, np.abs(eq["base_value"])))
    assert [s["sensitivity"] for s in summary["sensitivities"]] == ["rates_up_100bp", "equity_down", "equity_vol_up"]
    assert summary["sensitivities"][0]["best_estimate"]["change_se_paired"] > 0
    # the report shows the totals once the valuation sits in the run directory
    from pqflow.report.html import build_report_html

    value_liabilities_cli(run, BOOK)
    assert "Sensitivities (total)" in build_report_html(run) and "rates_up_100bp" in build_report_html(run)


def test_shocks_that_find_nothing_or_bad_files_are_refused(tmp_path):
    from pqflow.pipeline.flows import run_in_process

    data = copy.deepcopy(BASE)
    data["sensitivities"] = [{"name": "vols", "swaption_vol_relative": 0.2}]  # Hull-White typed in: no quotes
    with pytest.raises(ConfigError, match="sensitivity 'vols': swaption_vol_relative finds nothing to shock"):
        run_in_process(_write(tmp_path / "a", data), tmp_path / "a" / "run")
    assert not (tmp_path / "a" / "run").exists()
    data["sensitivities"] = [{"name": "rel", "curve_relative_shift": "shift.csv"}]
    root = tmp_path / "b"
    cfg = _write(root, data)
    (root / "shift.csv").write_text("maturity_years,relative_shift\n1,0.2\n10,abc\n")
    with pytest.raises(MarketDataError, match=r"shift.csv, data row 2: '10' and 'abc' must be numbers"):
        run_in_process(cfg, root / "run")
    # configuration rules: names unique, at least one shock, curve-only with keep_volatility_parameters
    for sens, message in (
        ([{"name": "x", "curve_shift_bp": 1.0}, {"name": "X", "ufr_shift_bp": 1.0}], "must not repeat"),
        ([{"name": "x"}], "at least one shock"),
        ([{"name": "x", "equity_vol_shift_points": 1.0, "keep_volatility_parameters": True}], "shocks the curve only"),
    ):
        bad = copy.deepcopy(BASE)
        bad["sensitivities"] = sens
        with pytest.raises(ConfigError, match=message):
            load_config(_write(tmp_path / "c", bad))


def test_relative_curve_shift_from_a_file(tmp_path):
    from pqflow.config.loader import load_config as load
    from pqflow.sensitivities.shocks import shocked_config

    data = copy.deepcopy(BASE)
    data["sensitivities"] = [{"name": "rel", "curve_relative_shift": "shift.csv", "curve_shift_bp": 10.0}]
    root = tmp_path / "r"
    cfg = load(_write(root, data))
    (root / "shift.csv").write_text("maturity_years,relative_shift\n1,0.5\n30,-0.2\n")
    out = shocked_config(cfg, cfg.sensitivities[0], root / "set", source="t")
    s = np.interp(PILLARS, [1.0, 30.0], [0.5, -0.2])  # linear between rows, flat beyond
    np.testing.assert_allclose(out.curve.values, np.array(ZEROS) * (1 + s) + 0.001, rtol=0, atol=1e-15)


@pytest.mark.flow
def test_prefect_flow_writes_the_same_sensitivity_sets(prefect_harness, run, tmp_path):
    """The Prefect flow runs the sensitivities beside the base parts (thread pool) and writes the
    very bytes the in-process run writes (each part depends on its seed, measure and batch only)."""
    from conftest import run_digests

    from pqflow.pipeline import run_quarterly

    result = run_quarterly(_write(tmp_path, BASE), tmp_path / "flow", workers=2)
    assert result["summary"]["verdict"] in ("pass", "inconclusive") and set(result["summary"]["sensitivities"]) == {
        "rates_up_100bp", "equity_down", "equity_vol_up"}
    flow, lib = run_digests(tmp_path / "flow"), run_digests(run)
    sens = {k for k in lib if k.startswith("sensitivities/") and k.endswith(".parquet")}
    assert sens and {k: flow[k] for k in sens} == {k: lib[k] for k in sens}
    verify_run(tmp_path / "flow")


def test_report_shows_the_sensitivities_table_and_bar_chart(run, tmp_path):
    """The report's sensitivities section: every sensitivity in the table and a bar chart of the
    best-estimate changes with their common-scenario error bars (issue 15)."""
    import shutil

    from pqflow.report import build_report_html

    copy = tmp_path / "run"
    shutil.copytree(run, copy)
    value_liabilities_cli(copy, BOOK, overwrite=True)  # the shared run may have been valued already
    html = build_report_html(copy)
    section = html[html.index("Sensitivities (total)"):]
    assert "Change in the total best estimate by sensitivity" in section and "<svg" in section
    for name in ("rates_up_100bp", "equity_down", "equity_vol_up"):
        assert name in section


def test_the_sensitivity_index_and_verdicts_read_as_written(run):
    # common practice for one owner per format: the typed readers give back what the run wrote
    from pqflow.storage.sensitivity_index import read_sensitivity_index
    from pqflow.storage.validation_summary import read_validation_summary

    raw = json.loads((run / "sensitivities" / "index.json").read_text(encoding="utf-8"))
    index = read_sensitivity_index(run)
    assert index is not None and index.names == [s["name"] for s in raw["sensitivities"]]
    assert [dict(s.entry) for s in index.sensitivities] == raw["sensitivities"] and index.note == raw["note"]
    summary = read_validation_summary(run / "validation" / "summary.json")
    assert summary.sensitivities == {s.name: {"verdict": s.verdict,
                                              "summary": f"sensitivities/{s.name}/validation/summary.json"}
                                     for s in index.sensitivities}
