"""A Gaussian part plugs in through :mod:`pqflow.models.parts` with no change in ``src/``.

The Ornstein-Uhlenbeck spread factor ``dz = -k z dt + s dW_z`` (Uhlenbeck and Ornstein, "On the
theory of the Brownian motion", Phys. Rev. 36 (1930)) is defined here, in the test: its part (the
model side, :class:`pqflow.models.economy.GaussianPart`) and its kind (the run side: its
``[parts.spread]`` section, build, ``calibration.json`` form, column drivers, martingale assets -
none, a factor is not traded - and description). Registered for the module only, it runs through
the real pipeline (load_config -> assemble_calibration -> plan_run -> generate_part, then the
library run with its validation), and the written files are checked against the closed form:

* market-consistent: ``E[z_t] = e^{-kt} z_0``, ``Var[z_t] = s^2 (1 - e^{-2kt}) / (2k)``
  (Uhlenbeck and Ornstein 1930; the exact OU transition, common practice);
* real-world, with price of risk ``lambda`` on its driver (``W^Q = W^P + int lambda dt``, the
  convention of ``calibration.json``, so ``dW^Q = dW^P + lambda dt``, as for an index whose
  premium is ``sigma lambda``): ``dz = (-k z + s lambda) dt + s dW^P``, so
  ``E_P[z_t] = e^{-kt} z_0 + s lambda (1 - e^{-kt}) / k`` (Girsanov's theorem; derived here);
* the density weights: ``E_P[q_density] = 1`` and ``E_P[q_density z_t] = E_Q[z_t]``, for the full
  density and the part's default block ``rates_spread``.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from typing import Any

import numpy as np
import pyarrow.parquet as pq
import pytest
from conftest import DEMO_TYPED, write_toml
from pydantic import BaseModel, ConfigDict, Field
from scipy import stats

from pqflow.calibration import assemble_calibration
from pqflow.calibration.assemble import load_calibration
from pqflow.config import load_config
from pqflow.errors import ConfigError
from pqflow.jobs import generate_part, plan_run, write_calibration
from pqflow.jobs.run import SerialExecutor, run_quarter
from pqflow.measure.blocks import column_drivers
from pqflow.models.economy import GaussianPart
from pqflow.models.kernels import Exposure
from pqflow.models.parts import PART_KINDS, PartAsset, PartContext, PartKind, register_part, unregister_part
from pqflow.models.schedule import as_schedule
from pqflow.storage.calibration_file import calibration_path
from pqflow.storage.names import density_block_column, density_column
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.validation.assets import martingale_assets
from pqflow.validation.moments import sampling_units
from pqflow.validation.run_files import load_run_inputs

COLUMN = "spread_factor"
DRIVER = "spread"
K, S, Z0, LAM = 0.7, 0.004, 0.002, 0.5


# ----------------------------------------------------------------------- the part, in this file


@dataclass(frozen=True)
class SpreadFactor:
    """The model side: one state ``z`` loading on its own driver with kernel ``s e^{-ku}``."""

    k: float
    s: float
    z0: float
    drivers: tuple[str, ...] = (DRIVER,)
    state_names: tuple[str, ...] = ("z_spread",)

    def initial_state(self) -> np.ndarray:
        return np.array([self.z0])

    def exposures(self, integral):
        return ((Exposure(driver=DRIVER, kind="exp", rate=self.k, scale=self.s),),)

    def step_rows(self, times, rates, correlation):
        dt = np.diff(times)
        return (np.zeros((dt.size, 1, rates.b_rows.shape[1])), np.exp(-self.k * dt)[:, None, None],
                np.zeros((dt.size, 1)))

    def known_columns(self):
        return (COLUMN,)

    def columns(self, times, states, wanted):
        return {COLUMN: states[:, :, 0].copy()} if COLUMN in wanted else {}

    def column_units(self):
        return {COLUMN: "decimal"}


class SpreadSection(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True)

    mean_reversion: float = Field(gt=0.0)
    volatility: float = Field(gt=0.0)
    initial: float
    price_of_risk: float = 0.0


class SpreadKind:
    """The run side of the spread part."""

    section = "spread"
    config_model = SpreadSection

    def drivers(self, section: SpreadSection) -> tuple[str, ...]:
        return (DRIVER,)

    def build(self, section: SpreadSection, context: PartContext) -> GaussianPart:
        return SpreadFactor(k=section.mean_reversion, s=section.volatility, z0=section.initial)

    def prices_of_risk(self, section: SpreadSection) -> dict[str, float]:
        return {DRIVER: section.price_of_risk}

    def to_json(self, part: Any) -> dict[str, Any]:
        return {"mean_reversion": part.k, "volatility": part.s, "initial": part.z0}

    def from_json(self, data: dict[str, Any]) -> GaussianPart:
        return SpreadFactor(k=float(data["mean_reversion"]), s=float(data["volatility"]), z0=float(data["initial"]))

    def column_drivers(self, column: str) -> frozenset[str] | None:
        return frozenset({DRIVER}) if column == COLUMN else None

    def martingale_assets(self, part: Any, curve: Any, columns: Any) -> list[PartAsset]:
        return []  # a spread factor is not a traded asset

    def describe(self, section: SpreadSection) -> str:
        return f"Ornstein-Uhlenbeck spread factor (k {section.mean_reversion:g}, s {section.volatility:g})"


@pytest.fixture(scope="module")
def spread_kind():
    kind = register_part(SpreadKind())
    yield kind
    unregister_part(kind.section)


def _config(path, **spread: Any):
    with open(DEMO_TYPED, "rb") as fh:
        data = tomllib.load(fh)
    data["simulation"].update({"scenarios": 2000, "batch_size": 500, "horizon_years": 10})
    data["real_world"]["target_year"] = 10
    data["outputs"]["bond_maturities"] = [1, 5, 10]
    rho = data["equity"].pop("correlation_with_rates")
    data["correlations"] = {
        "drivers": ["rates", data["equity"]["name"], DRIVER],
        "matrix": [[1.0, rho, 0.3], [rho, 1.0, -0.2], [0.3, -0.2, 1.0]],
    }
    data["parts"] = {"spread": {"mean_reversion": K, "volatility": S, "initial": Z0, "price_of_risk": LAM, **spread}}
    return write_toml(path, data)


@pytest.fixture(scope="module")
def spread_run(spread_kind, tmp_path_factory):
    """The pipeline step by step, as ``tests/test_liabilities_reconciliation.py`` does."""
    root = tmp_path_factory.mktemp("spread")
    cfg_path = _config(root / "spread.toml")
    cfg = load_config(cfg_path)
    cal = assemble_calibration(cfg)
    plan = plan_run(cfg)
    out = root / "run"
    out.mkdir()
    write_calibration(out, cal)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, out)
    return cfg_path, cfg, cal, out


def _wide(run_dir, measure: str, column: str) -> tuple[np.ndarray, np.ndarray]:
    """``(times, values (n_paths, n_times))`` of one column over every part of a set."""
    frames = [pq.read_table(p).to_pandas() for p in ScenarioSet(run_dir=run_dir, measure=measure).parts()]
    values, times = [], None
    for f in frames:
        table = f.pivot(index="scenario", columns="time", values=column)
        times = np.asarray(table.columns, dtype=float)
        values.append(table.to_numpy())
    assert times is not None
    return times, np.vstack(values)


# ----------------------------------------------------------------------- the checks


def test_the_kind_satisfies_the_protocol_and_its_section_is_strict(spread_kind, tmp_path):
    assert isinstance(spread_kind, PartKind) and PART_KINDS["spread"] is spread_kind
    assert isinstance(spread_kind.build(SpreadSection(mean_reversion=K, volatility=S, initial=Z0), None),
                      GaussianPart)
    # a misspelt key in the section, and an unknown part name, are refused naming the section
    with pytest.raises(ConfigError, match=r"parts\.spread.*volatilty"):
        load_config(_config(tmp_path / "bad_key.toml", volatilty=0.1))
    path = _config(tmp_path / "bad_name.toml")
    path.write_text(path.read_text().replace("[parts.spread]", "[parts.spred]"))
    with pytest.raises(ConfigError, match=r"parts\.spred.*no part kind named 'spred'"):
        load_config(path)
    # the registry decides the column's drivers (before the built-in prefix table, which would read
    # ``spread_`` as a credit rating's spread)
    assert column_drivers(COLUMN, ("rates",)) == {DRIVER}


def test_without_registration_the_section_is_an_unknown_part(tmp_path, spread_kind):
    unregister_part("spread")
    try:
        with pytest.raises(ConfigError, match=r"parts\.spread.*no part kind named 'spread'"):
            load_config(_config(tmp_path / "c.toml"))
    finally:
        register_part(spread_kind)


def test_the_files_carry_the_spread_column_with_the_ou_moments(spread_run):
    """Market-consistent set: exact mean (antithetic pairs of a linear-Gaussian state average to
    its mean) and the variance's chi-square test (scipy.stats.chi2) at three times."""
    _, _, _, out = spread_run
    mc = ScenarioSet(run_dir=out, measure="market_consistent")
    assert COLUMN in mc.column_names() and mc.units()[COLUMN] == "decimal"
    times, z = _wide(out, "market_consistent", COLUMN)
    mean = np.exp(-K * times) * Z0
    np.testing.assert_allclose(z.mean(axis=0), mean, rtol=0.0, atol=1e-13)
    units = sampling_units(z, antithetic=True)  # pair averages: the mean exactly
    np.testing.assert_allclose(units, np.broadcast_to(mean, units.shape), rtol=0.0, atol=1e-13)
    n_pairs = z.shape[0] // 2
    for t in (1.0, 5.0, 10.0):
        j = int(np.argmin(np.abs(times - t)))
        var = S**2 * (1 - np.exp(-2 * K * t)) / (2 * K)
        # each pair holds +e and -e: sum over paths of e^2 / 2 is a sum of n_pairs squared normals
        stat = float(np.sum((z[:, j] - mean[j]) ** 2) / 2 / var)
        lo, hi = stats.chi2.ppf([0.0005, 0.9995], n_pairs)  # 0.1% two-sided at each of 3 times
        print(f"t={t:g}: sample var {np.mean((z[:, j] - mean[j]) ** 2):.3e}, OU var {var:.3e}, "
              f"chi2 {stat:.0f} in [{lo:.0f}, {hi:.0f}]")
        assert lo < stat < hi


def test_the_real_world_set_and_its_densities_carry_the_price_of_risk(spread_run):
    _, _, _, out = spread_run
    rw = ScenarioSet(run_dir=out, measure="real_world")
    names = rw.column_names()
    block = density_block_column("real_world", "rates_spread")
    assert block in names and rw.density_blocks()["rates_spread"] == ("rates", DRIVER)
    times, z = _wide(out, "real_world", COLUMN)
    mean_q = np.exp(-K * times) * Z0
    mean_p = mean_q + S * LAM * (1 - np.exp(-K * times)) / K  # Girsanov, derived in the module doc
    np.testing.assert_allclose(z.mean(axis=0), mean_p, rtol=0.0, atol=1e-13)
    for column in (density_column("real_world"), block):
        _, w = _wide(out, "real_world", column)
        for label, x, target in (("density", w, np.ones_like(times)), ("density x spread", w * z, mean_q)):
            u = sampling_units(x, antithetic=True)
            se = u.std(axis=0, ddof=1) / np.sqrt(u.shape[0])
            zscore = (u.mean(axis=0) - target)[1:] / se[1:]
            print(f"{column} {label}: max |z| {np.max(np.abs(zscore)):.2f} over {times.size - 1} times")
            assert np.all(np.abs(zscore) < 4.0)  # 4 SE, common practice
        # power: without the density the real-world mean is many SE from the market-consistent one
        u = sampling_units(z, antithetic=True)
        se = u.std(axis=0, ddof=1) / np.sqrt(u.shape[0])
        assert np.abs((u.mean(axis=0) - mean_q)[-1] / se[-1]) > 10.0


def test_calibration_json_round_trips_the_part(spread_run):
    _, cfg, cal, out = spread_run
    back = load_calibration(calibration_path(out))
    assert back.plugin_parts == cal.plugin_parts == {"spread": SpreadFactor(k=K, s=S, z0=Z0)}
    assert float(as_schedule(back.extra_prices_of_risk[DRIVER])(1.0)) == LAM
    assert back.inputs_hash == cal.inputs_hash and back.inputs["parts"]["spread"]["mean_reversion"] == K


def test_the_library_run_validates_with_the_part_and_no_assets(spread_run, tmp_path):
    cfg_path, _, _, _ = spread_run
    out = tmp_path / "run"
    result = run_quarter(cfg_path, out, executor=SerialExecutor(), scenarios=400)
    assert (out / "manifest.json").is_file() and (out / "validation" / "report.html").is_file()
    inputs = load_run_inputs(out)
    columns = ScenarioSet(run_dir=out, measure="market_consistent").column_names()
    assert COLUMN in columns
    assert martingale_assets(inputs, columns) == []  # the spread factor declares none
    assert result["summary"]
    # the density check judged the part's block in both sets, and the density budget carries its
    # price of risk (the spread's lambda = 0.5 is most of the log-density variance here)
    import pandas as pd

    density = pd.read_csv(out / "validation" / "density.csv")
    assert {"q_density_rates_spread", "p_density_rates_spread"} <= set(density.column)
    budget = pd.read_csv(out / "validation" / "density_budget.csv")
    assert DRIVER in set(budget.price_of_risk)
    # the report's parameter table describes the part through its kind
    report = (out / "validation" / "report.html").read_text(encoding="utf-8")
    assert "spread (part plug-in)" in report and "Ornstein-Uhlenbeck spread factor (k 0.7, s 0.004)" in report


def test_pqflow_check_describes_the_part(spread_run):
    from typer.testing import CliRunner

    from pqflow.cli import app

    cfg_path, _, _, _ = spread_run
    result = CliRunner().invoke(app, ["check", str(cfg_path)])
    assert result.exit_code == 0, result.output
    assert "part spread: Ornstein-Uhlenbeck spread factor (k 0.7, s 0.004)" in result.output
    assert "density block rates_spread: drivers rates, spread" in result.output
    assert "spread_factor" in result.output


def test_a_sensitivity_set_rebuilds_the_part_on_its_curve(spread_run):
    """A curve-only sensitivity (calibration/sensitivity.py) rebuilds the plug-in from its
    section with the shocked curve and keeps its price of risk; the model then carries its driver."""
    from pqflow.calibration.assemble import build_model
    from pqflow.calibration.sensitivity import curve_only_calibration

    _, cfg, cal, _ = spread_run
    shocked = cfg.model_copy(update={"curve": cfg.curve.model_copy(
        update={"values": [v + 0.01 for v in cfg.curve.values]})})
    sens = curve_only_calibration(cal, shocked)
    assert sens.curve.discount(10.0) < cal.curve.discount(10.0)  # the shock took effect
    assert sens.plugin_parts == cal.plugin_parts and sens.extra_prices_of_risk[DRIVER] == LAM
    model = build_model(sens, (1.0,))
    assert DRIVER in model.driver_names and COLUMN in model.known_columns()
