"""The valuation flow under Prefect's test harness: same results as the library job.

Reference: the flow only schedules the library functions (common practice for thin flows, see
DEVELOPERS.md), so its summary must equal ``value_liabilities_cli`` on the same inputs, field for
field, and its files must hold the same numbers.
"""

from __future__ import annotations

import copy

import pandas as pd
import pytest
from conftest import REPO, write_toml

from pqflow.calibration import assemble_calibration
from pqflow.config import load_config
from pqflow.jobs import generate_part, plan_run, write_calibration
from pqflow.liabilities import LiabilityDataError, value_liabilities_cli

pytestmark = pytest.mark.flow

__all__: list[str] = []


def _small_run(root):
    flat = [1.0, 10.0, 30.0, 50.0, 70.0]
    data = {
        "run": {"name": "liab-flow", "valuation_date": "2026-09-30"},
        "curve": {"kind": "zero_rates", "compounding": "continuous", "maturities": flat,
                  "values": [0.025, 0.028, 0.031, 0.032, 0.033]},
        "hull_white": {"mean_reversion": 0.05, "volatility": 0.009},
        "equity": {"name": "veldmark_all_share", "level": 1000.0, "dividend_yield": 0.028,
                   "volatility": 0.17, "correlation_with_rates": -0.15},
        "real_world": {"rates_market_price_of_risk": 0.1, "equity_risk_premium": 0.035},
        "simulation": {"scenarios": 200, "horizon_years": 25, "steps_per_year": 1, "seed": 3,
                       "batch_size": 100, "antithetic": True},
        "outputs": {"bond_maturities": [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 15, 20, 25, 30]},
    }
    cfg = load_config(write_toml(root / "run.toml", copy.deepcopy(data)))
    cal, plan = assemble_calibration(cfg), plan_run(cfg)
    out = root / "run"
    out.mkdir()
    write_calibration(out, cal)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, out)
    return out


def test_flow_matches_library_job(prefect_harness, tmp_path):
    from pqflow.pipeline.valuation import value_liabilities

    run = _small_run(tmp_path)
    book = REPO / "scenario_configs" / "demo_liabilities.toml"
    by_flow = value_liabilities(str(run), str(book), str(tmp_path / "flow"))
    by_lib = value_liabilities_cli(run, book, tmp_path / "lib")
    strip = lambda s: {k: v for k, v in s.items() if k != "files"}  # noqa: E731
    assert strip(by_flow) == strip(by_lib)
    a = pd.read_parquet(tmp_path / "flow" / "liability_values.parquet")
    b = pd.read_parquet(tmp_path / "lib" / "liability_values.parquet")
    pd.testing.assert_frame_equal(a, b)
    # A bad portfolio stops the flow before anything is valued or written.
    bad = tmp_path / "bad.toml"
    bad.write_text(book.read_text().replace("premium = 25000", "premium = -25000"))
    with pytest.raises(LiabilityDataError, match=r"id 'UL-01'\): premium = -25000 is negative"):
        value_liabilities(str(run), str(bad), str(tmp_path / "never"))
    assert not (tmp_path / "never").exists()
