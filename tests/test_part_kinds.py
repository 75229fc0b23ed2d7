"""The shipped part kinds: one registry (``pqflow.calibration.part_kinds``) that every process
loads, and the inflation part behind the part interface with its legacy locations.

Checks: a fresh interpreter that imports only what a worker or a command imports has the kinds
registered (a Dask process worker unpickles a step of ``pqflow.jobs``; the report and compare
read a run); the inflation kind satisfies the protocol, its ``calibration.json`` form round-trips
to the same part, its section stays the top-level ``[inflation]`` (``[parts.inflation]`` is
refused); its year-on-year cap instrument is the one the market-consistency check reprices, and
its payoff is the sum of deflated annual caplets ``(I_i / I_{i-1} - 1 - K)^+`` (the year-on-year
caplet's payoff, common practice) computed here by hand on a small grid.
"""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
from conftest import DEMO, REPO

import pqflow.calibration  # noqa: F401  (registers the shipped kinds, as every process does)
from pqflow.calibration import assemble_calibration
from pqflow.calibration.inflation_kind import InflationKind
from pqflow.config import load_config
from pqflow.errors import ConfigError
from pqflow.market.curve import LogDiscountCurve
from pqflow.models.parts import PART_KINDS, PartInstrumentContext, PartKind, recorded_parts
from pqflow.storage.calibration_file import calibration_record
from pqflow.validation.run_files import time_index


@pytest.mark.parametrize("module", ["pqflow.jobs.steps", "pqflow.jobs.run", "pqflow.validation.market_consistency",
                                    "pqflow.report.compare", "pqflow.report.html"])
def test_a_fresh_process_importing_a_worker_or_command_module_has_the_shipped_kinds(module):
    code = f"import {module}; from pqflow.models.parts import PART_KINDS; print(','.join(sorted(PART_KINDS)))"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, check=True)
    assert "inflation" in out.stdout.strip().split(","), out.stdout + out.stderr


def test_the_command_line_registers_them_before_it_reads_a_configuration():
    """``pqflow.cli`` imports lazily; each command that reads a configuration registers first."""
    code = ("import pqflow.cli as c; from pqflow.models.parts import PART_KINDS; before = sorted(PART_KINDS); "
            "c._register_part_kinds(); print(before, sorted(PART_KINDS))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, check=True)
    assert out.stdout.strip() == "[] ['indices', 'inflation']", out.stdout + out.stderr
    source = (REPO / "src" / "pqflow" / "cli.py").read_text(encoding="utf-8")
    imports = source.count("import load_config\n") + source.count("import apply_overrides, load_config\n")
    assert imports == source.count("\n    _register_part_kinds()\n") == 4  # each reading command registers


def test_the_inflation_kind_is_a_part_kind_with_its_legacy_places():
    kind = PART_KINDS["inflation"]
    assert isinstance(kind, InflationKind) and isinstance(kind, PartKind)
    assert (kind.config_key, kind.json_key, kind.fit_key, kind.instruments_key) == (
        "inflation", "inflation", "inflation", "inflation_caps")
    from pqflow.config.part_sections import PART_SECTIONS

    assert "inflation" not in PART_SECTIONS  # its table is [inflation], never [parts.inflation]
    with pytest.raises(ValueError, match=r"parts\.inflation.*no part kind named 'inflation'"):
        from pqflow.config.part_sections import validate_part_sections

        validate_part_sections({"inflation": {}})


def test_the_demo_inflation_part_round_trips_through_its_kind():
    cfg = load_config(DEMO)
    cal = assemble_calibration(cfg)
    assert cal.inflation is not None
    kind = PART_KINDS["inflation"]
    form = kind.to_json(cal.inflation)
    back = kind.from_json(form)
    assert kind.to_json(back) == form
    times = np.linspace(0.0, 30.0, 7)
    np.testing.assert_array_equal(back.real_curve.discount(times), cal.inflation.real_curve.discount(times))
    record = calibration_record(cal.to_json(), "demo")
    found = [(name, entry) for name, _, entry in recorded_parts(record.parameters, record.plugin_parts)]
    assert [name for name, _ in found] == ["inflation"] and found[0][1] == record.inflation
    # the calibration calls the kind's fit: its prices of risk and fit record are the run's
    fitted = kind.calibrate(cfg.inflation, {k: cfg.market_file(k) for k in kind.market_data_keys
                                            if cfg.market_file(k) is not None},
                            _context(cal))
    assert fitted.fit == cal.fit["inflation"] and fitted.instruments == cal.instruments.get("inflation_caps", [])
    for driver, lam in fitted.prices_of_risk.items():
        assert lam == cal.extra_prices_of_risk[driver]


def _context(cal):
    from pqflow.models.parts import PartContext

    return PartContext(curve=cal.curve, rates=cal.rates, correlation=cal.driver_correlation.pair)


def test_a_year_on_year_cap_is_repriced_as_deflated_annual_caplets():
    kind = InflationKind()
    times = np.array([0.0, 1.0, 2.0, 3.0])
    ctx = PartInstrumentContext(curve=LogDiscountCurve(maturities=np.array([1.0, 5.0]),
                                                       discount_factors=np.array([0.97, 0.85])),
                                columns=("cpi", "deflator"), times=times, time_index=time_index)
    records = [{"maturity": 3.0, "strike": 0.02, "kind": "cap", "market_price": 0.011, "model_price": 0.0105},
               {"maturity": 2.0, "strike": 0.01, "kind": "floor", "market_price": 0.002, "model_price": None}]
    cap, floor = kind.instruments(records, ctx)
    assert cap.label == "year-on-year inflation cap 3y K=2.00%" and cap.untestable is None
    cpi = np.array([[100.0, 103.0, 104.0, 108.0], [100.0, 99.0, 101.0, 102.0]])
    deflator = np.array([[1.0, 0.97, 0.93, 0.9], [1.0, 0.96, 0.94, 0.91]])
    expected_cap = [0.97 * 0.01 + 0.93 * 0.0 + 0.9 * (108 / 104 - 1.02), 0.0 + 0.94 * (101 / 99 - 1.02) + 0.0]
    np.testing.assert_allclose(cap.value(times, {"cpi": cpi}, deflator), expected_cap, rtol=1e-12)
    expected_floor = [0.0 + 0.93 * (0.01 - (104 / 103 - 1)), 0.96 * (0.01 + 0.01) + 0.0]
    np.testing.assert_allclose(floor.value(times, {"cpi": cpi}, deflator), expected_floor, rtol=1e-12)
    # tolerance max(5 bp, 3%) and material max(10 bp, 10%) of the premium (the check's stated rule)
    assert cap.tolerance == max(5e-4, 0.03 * 0.011) and cap.material == max(1e-3, 0.10 * 0.011)
    assert floor.tolerance == 5e-4 and floor.material == 1e-3
    # a grid that misses a caplet date: not testable, said so
    ctx_off = PartInstrumentContext(curve=ctx.curve, columns=("cpi",), times=np.array([0.0, 1.0, 3.0]),
                                    time_index=time_index)
    assert kind.instruments(records[:1], ctx_off)[0].untestable == (
        "not testable from the files (years [2] are not output times)")
    ctx_no_cpi = PartInstrumentContext(curve=ctx.curve, columns=("deflator",), times=times, time_index=time_index)
    assert kind.instruments(records[:1], ctx_no_cpi)[0].untestable == "not testable from the files (missing cpi)"


def test_inflation_in_a_parts_table_is_refused_naming_it(tmp_path):
    text = DEMO.read_text()
    path = tmp_path / "c.toml"
    path.write_text(text.replace("[inflation]", "[parts.inflation]", 1))
    with pytest.raises(ConfigError, match=r"parts\.inflation"):
        load_config(path)
