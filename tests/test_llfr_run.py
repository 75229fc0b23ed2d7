"""A run on the Solvency II review's curve (last liquid forward rate): configuration rules,
calibration.json, ``pqflow curve``, and the Hull-White / G2++ fits, house view and every check
working on it (the demo variant ``scenario_configs/demo_llfr.toml``, invented data).

The checks' own references (martingale test, swaption and option repricing, reconciliation)
are named in tests/test_validation_parts.py; here they must pass on a curve with a kinked
forward (piecewise constant to the first smoothing point, then exponential towards the UFR),
family-wise at 99% at fixed seeds.
"""

from __future__ import annotations

import csv
import shutil
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import REPO
from typer.testing import CliRunner

from pqflow.calibration.assemble import fit_curve, load_calibration
from pqflow.cli import app
from pqflow.config.loader import load_config, parse_config
from pqflow.errors import ConfigError, MarketDataError
from pqflow.jobs.sensitivities import (
    calibrate_sensitivity,
    generate_sensitivity_part,
    record_sensitivities,
    sensitivity_tasks,
    validate_sensitivity,
)
from pqflow.jobs.steps import calibrate_step, generate_part, plan_run, validate_staged_run
from pqflow.market.last_liquid_forward import LastLiquidForwardCurve
from pqflow.storage.jsonio import read_json
from pqflow.validation.evidence import run_checks

DEMO_LLFR = REPO / "scenario_configs" / "demo_llfr.toml"
DEMO_G2PP = REPO / "scenario_configs" / "demo_g2pp.toml"
MARKET = REPO / "scenario_configs" / "market_data" / "veldmark_2026q3"
runner = CliRunner()


def _small(path: Path, **llfr: Any) -> dict[str, Any]:
    data = load_config(path).model_dump(mode="json", exclude_none=True)
    data["simulation"].update(scenarios=1000, batch_size=500, horizon_years=15)
    for key in ("inflation", "credit"):
        data.pop(key, None)
    for key in ("inflation_swaps", "inflation_caps", "credit_spreads"):
        data["market_data"].pop(key, None)
    if llfr:
        data["market_data"]["curve"] = "market_data/veldmark_2026q3/curve_llfr.csv"
        data["curve_extrapolation"] = llfr
    return data


def _build(root: Path, data: dict[str, Any], base: Path) -> Path:
    cfg = parse_config(data, source=f"{base} (made small for tests)", base_dir=base.parent)
    root.mkdir(parents=True)
    cal = calibrate_step(cfg, root)
    plan = plan_run(cfg)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, root)
    return root


@pytest.mark.parametrize("model", ["hull_white", "g2pp"])
def test_fits_house_view_and_every_check_work_on_the_llfr_curve(tmp_path, model):
    if model == "hull_white":
        data, base = _small(DEMO_LLFR), DEMO_LLFR
    else:
        data, base = _small(DEMO_G2PP, method="last_liquid_forward", ultimate_forward_rate=0.034, alpha=0.11), DEMO_G2PP
    run = _build(tmp_path / "run", data, base)
    cal = read_json(run / "calibration.json")
    fit = cal["fit"]["curve"]
    # calibration.json records the method, the first smoothing point and the LLFR (continuous)
    assert fit["method"] == "last_liquid_forward"
    assert fit["first_smoothing_point"] == 20.0
    assert cal["parameters"]["curve"]["kind"] == "last_liquid_forward"
    assert cal["parameters"]["curve"]["last_liquid_forward_rate"] == fit["last_liquid_forward_rate"]
    curve = load_calibration(run / "calibration.json").curve
    assert isinstance(curve, LastLiquidForwardCurve)
    # LLFR = sum of weight x forward, the weights of curve_llfr.csv
    assert fit["last_liquid_forward_rate"] == pytest.approx(sum(t["weight"] * t["forward"] for t in fit["llfr_terms"]),
                                                            abs=1e-15)
    assert [t["weight"] for t in fit["llfr_terms"]] == [0.40, 0.15, 0.35, 0.06, 0.04]
    assert cal["fit"][model]["rmse_bp"] < 5.0  # the swaption fit is as good as on Smith-Wilson
    # the house view is met on this curve too (expected short rate path, demo.toml's target)
    target = cal["expected_short_rate"]["target"]
    np.testing.assert_allclose(target["real_world"], target["house_view"], atol=1e-10)
    checks = run_checks(run, ess_warning_share=0.10).summary
    verdicts = {name: c["verdict"] for name, c in checks["checks"].items()}
    print(f"\n[{model}] LLFR {fit['last_liquid_forward_rate']:.6%}; checks: {verdicts}")
    # no check fails; cells without the power to judge are inconclusive (issue 11), not passes
    assert checks["verdict"] in ("pass", "inconclusive") and "fail" not in verdicts.values(), verdicts


def test_configuration_rules(tmp_path):
    base = _small(DEMO_LLFR)
    # keys of the other method are refused, naming them
    for extra, method in (({"alpha_floor": 0.07}, "last_liquid_forward"), ({"coupon_frequency": 2}, "smith_wilson"),
                          ({"phase_in_year": 2027}, "smith_wilson")):
        data = {**base, "curve_extrapolation": {**base["curve_extrapolation"], "method": method, **extra}}
        if method == "smith_wilson":
            data["curve_extrapolation"] = {"method": method, "ultimate_forward_rate": 0.034, **extra}
        with pytest.raises(ConfigError, match=next(iter(extra))):
            parse_config(data, source="t.toml", base_dir=DEMO_LLFR.parent)
    data = {**base, "curve_extrapolation": {**base["curve_extrapolation"], "phase_in_year": 2028}}
    with pytest.raises(ConfigError, match="alpha or phase_in_year, not both"):
        parse_config(data, source="t.toml", base_dir=DEMO_LLFR.parent)
    # the phasing-in value of the year is used
    data["curve_extrapolation"].pop("alpha")
    _, fit = fit_curve(parse_config(data, source="t.toml", base_dir=DEMO_LLFR.parent))
    assert fit["alpha"] == 0.182 and fit["alpha_source"] == "phasing-in, 2028"
    # semi-annual fixed legs: every swap still reprices at par ([TD] 8.5.2), a different curve
    semi = {**base, "curve_extrapolation": {**base["curve_extrapolation"], "coupon_frequency": 2}}
    c2, fit2 = fit_curve(parse_config(semi, source="t.toml", base_dir=DEMO_LLFR.parent))
    c1, fit1 = fit_curve(parse_config(base, source="t.toml", base_dir=DEMO_LLFR.parent))
    assert fit2["coupon_frequency"] == 2 and fit2["max_repricing_error"] < 1e-12
    assert abs(float(c2.zero_rate(20.0)) - float(c1.zero_rate(20.0))) > 1e-5
    # Smith-Wilson with a weights file, and the LLFR method without weights: refused, naming both
    sw = {**base, "curve_extrapolation": {"method": "smith_wilson", "ultimate_forward_rate": 0.034}}
    with pytest.raises(MarketDataError, match="llfr_weight.*smith_wilson"):
        fit_curve(parse_config(sw, source="t.toml", base_dir=DEMO_LLFR.parent))
    plain = {**base, "market_data": {**base["market_data"], "curve": "market_data/veldmark_2026q3/curve.csv"}}
    with pytest.raises(MarketDataError, match="curve.csv.*needs an 'llfr_weight' column"):
        fit_curve(parse_config(plain, source="t.toml", base_dir=DEMO_LLFR.parent))


def test_curve_command_writes_whole_maturities(tmp_path):
    out = tmp_path / "curve.csv"
    result = runner.invoke(app, ["curve", str(DEMO_LLFR), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert "first smoothing point 20y" in result.output and "LLFR" in result.output and "Caution" in result.output
    with out.open(newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["maturity_years"] for r in rows] == [str(m) for m in range(1, 151)]
    curve, _ = fit_curve(load_config(DEMO_LLFR))
    t = np.arange(1.0, 151.0)
    col = lambda name: np.array([float(r[name]) for r in rows])  # noqa: E731
    p = curve.discount(t)
    np.testing.assert_array_equal(col("discount_factor"), p)
    # definitions: P = (1 + z_a)^{-t} = e^{-z_c t}; one-year forward P(t-1)/P(t) - 1
    np.testing.assert_allclose((1 + col("zero_rate_annual")) ** (-t), p, rtol=1e-13)
    np.testing.assert_allclose(np.exp(-col("zero_rate_continuous") * t), p, rtol=1e-13)
    np.testing.assert_allclose(1 + col("forward_1y_annual"), curve.discount(t - 1) / p, rtol=1e-13)
    np.testing.assert_allclose(col("forward_1y_continuous"), np.log(curve.discount(t - 1) / p), rtol=1e-12)
    # an existing file is not replaced without --overwrite; Smith-Wilson curves work too
    again = runner.invoke(app, ["curve", str(REPO / "scenario_configs" / "demo.toml"), "--out", str(out)])
    assert again.exit_code == 2 and "exists" in again.output
    sw = runner.invoke(app, ["curve", str(REPO / "scenario_configs" / "demo.toml"), "--out", str(out), "--overwrite"])
    assert sw.exit_code == 0 and "Smith-Wilson" in sw.output
    # a bad curve file: exit 2, the file and row named, nothing written
    bad_dir = tmp_path / "bad"
    shutil.copytree(MARKET.parent.parent, bad_dir)
    bad_curve = bad_dir / "market_data" / "veldmark_2026q3" / "curve_llfr.csv"
    bad_curve.write_text(bad_curve.read_text().replace("50,0.02996,0.04", "50,0.02996,0.05"))
    result = runner.invoke(app, ["curve", str(bad_dir / "demo_llfr.toml"), "--out", str(tmp_path / "none.csv")])
    assert result.exit_code == 2 and "sum to 1.01" in result.output and not (tmp_path / "none.csv").exists()


def _run_sensitivities(config, base, plan, run_dir, *, source: str = "configuration"):
    """Every sensitivity one after another in this process (no scheduler), with the library's
    steps: calibrate, generate, validate, record. Returns the part records and the updated run
    summary (``None`` without sensitivities)."""
    if not config.sensitivities:
        return [], None
    parts = []
    summaries = {}
    for sens in config.sensitivities:
        cal = calibrate_sensitivity(config, sens, base, run_dir, source=source)
        for m, b in sensitivity_tasks(plan, sens):
            parts.append(generate_sensitivity_part(cal, plan, sens.name, m, b, run_dir))
        summaries[sens.name] = validate_sensitivity(run_dir, sens, config)
    return parts, record_sensitivities(run_dir, config, summaries)


def test_curve_only_sensitivity_on_the_llfr_curve_reprices_the_kept_rates_model(tmp_path):
    """A +100 bp sensitivity with the base volatility parameters kept: the LLFR curve refitted on
    the shifted inputs, the swaptions recorded at the money on it with the kept Hull-White model's
    Jamshidian price only, and the set's Monte Carlo prices must reproduce them (the check's
    model-price cells; a planted 20% error in one recorded price must fail)."""
    import json

    from pqflow.validation.sensitivity_checks import run_market_consistent_checks

    data = _small(DEMO_LLFR)
    data["sensitivities"] = [s for s in data["sensitivities"] if s["name"] == "rates_up_100bp"]
    cfg = parse_config(data, source=f"{DEMO_LLFR} (made small)", base_dir=DEMO_LLFR.parent)
    root = tmp_path / "run"
    root.mkdir()
    cal = calibrate_step(cfg, root)
    plan = plan_run(cfg)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, root)
    validate_staged_run(root, cfg)
    _, summary = _run_sensitivities(cfg, cal, plan, root)
    assert summary is not None and summary["sensitivities"]["rates_up_100bp"]["verdict"] in ("pass", "inconclusive")
    set_dir = root / "sensitivities" / "rates_up_100bp"
    sens_cal = read_json(set_dir / "calibration.json")
    assert sens_cal["fit"]["curve"]["method"] == "last_liquid_forward"
    assert sens_cal["parameters"]["hull_white"] == read_json(root / "calibration.json")["parameters"]["hull_white"]
    # the shifted inputs: every par rate +100 bp, the LLFR moved with them
    base_llfr = read_json(root / "calibration.json")["fit"]["curve"]["last_liquid_forward_rate"]
    assert sens_cal["fit"]["curve"]["last_liquid_forward_rate"] > base_llfr + 0.008
    swaptions = sens_cal["instruments"]["swaptions"]
    entry = read_json(set_dir / "validation" / "summary.json")["checks"]["market_consistency"]
    # one model-price cell each; a cell without the power to see its material deviation is
    # inconclusive (never a failure of a correct set)
    assert entry["verdict"] in ("pass", "inconclusive") and entry["cells"] == len(swaptions) > 0
    bad = dict(sens_cal)
    bad["instruments"] = {**sens_cal["instruments"], "swaptions": [dict(s) for s in swaptions]}
    bad["instruments"]["swaptions"][3]["model_price"] *= 1.2
    (set_dir / "calibration.json").write_text(json.dumps(bad))
    planted = run_market_consistent_checks(set_dir, ess_warning_share=0.1).summary["checks"]["market_consistency"]
    assert planted["verdict"] == "fail"
