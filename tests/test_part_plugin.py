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

The kind also uses every optional hook (:mod:`pqflow.models.parts`): a market-data file of its
own (an invented "Veldmark" spread-option quote file, ``quotes`` in its section), a fit of its
volatility to those premiums (its fit record under ``calibration.json`` ``fit.spread``, its
instruments under ``instruments.spread``), the repricing of its instruments by the
market-consistency check (judged by the check's one rule, ``quote_cells``), and its rows in the
report and in ``pqflow compare``. The option pays ``(z_T - K)^+`` at ``T`` (notional 1); its
price is ``P(0, T)`` times Bachelier's formula under the ``T``-forward measure, where ``z_T`` is
normal with the OU variance and the mean shifted by the covariance with the bond:
``E^T[z_T] = e^{-kT} z_0 - rho s sigma_r int_0^T e^{-k(T-u)} B(u, T) du``, ``B(u, T) =
(1 - e^{-a(T-u)}) / a`` (Hull-White rates; change of numeraire, Geman, El Karoui and Rochet 1995;
Brigo and Mercurio, *Interest Rate Models*, 2006, ch. 2, from memory; the integral derived here:
``((1 - e^{-kT}) / k - (1 - e^{-(k+a)T}) / (k + a)) / a``). Bachelier's formula
``(m - K) N(d) + sqrt(v) n(d)``, ``d = (m - K) / sqrt(v)`` (Bachelier 1900) is checked against
scipy's quadrature here.
"""

from __future__ import annotations

import dataclasses
import json
import tomllib
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from conftest import DEMO_TYPED, write_toml
from pydantic import BaseModel, ConfigDict, Field, model_validator
from scipy import integrate, optimize, stats

from pqflow.calibration import assemble_calibration
from pqflow.calibration.assemble import load_calibration
from pqflow.config import load_config
from pqflow.errors import ConfigError, MarketDataError
from pqflow.jobs import generate_part, plan_run, write_calibration
from pqflow.jobs.run import SerialExecutor, run_quarter
from pqflow.market.curve import DiscountCurve
from pqflow.market.data_files import read_number_table
from pqflow.measure.blocks import column_drivers
from pqflow.models.economy import GaussianPart
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.kernels import Exposure
from pqflow.models.parts import (
    PART_KINDS,
    PartAsset,
    PartContext,
    PartFit,
    PartInstrument,
    PartInstrumentContext,
    PartKind,
    register_part,
    unregister_part,
)
from pqflow.models.schedule import as_schedule
from pqflow.storage.calibration_file import calibration_path
from pqflow.storage.names import density_block_column, density_column
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.validation.assets import martingale_assets
from pqflow.validation.market_consistency import market_consistency_check, quote_cells
from pqflow.validation.moments import sampling_units
from pqflow.validation.run_files import load_run_inputs, time_index
from pqflow.validation.summary import family_critical_z

COLUMN = "spread_factor"
DRIVER = "spread"
K, S, Z0, LAM = 0.7, 0.004, 0.002, 0.5
#: the volatility the invented Veldmark spread-option premiums are made with (the fit must find it)
S_QUOTES = 0.0045
#: (expiry, strike) of the invented quotes: at and around the forward spread, whole years
QUOTES = ((1.0, 0.001), (2.0, 0.0), (3.0, 0.0), (5.0, -0.002), (5.0, 0.002))
#: a quote's stated tolerance and material deviation: its price for the volatility moved by 5% and
#: 10% of itself (the smaller move; as the vol-point rule of the index options, twice the tolerance)
TOL_REL, MATERIAL_REL = 0.05, 0.10


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
    volatility: float | None = Field(default=None, gt=0.0)
    #: a premium file (expiry_years, strike, premium) the volatility is fitted to, relative to
    #: the configuration file; exactly one of volatility and quotes
    quotes: str | None = None
    initial: float
    price_of_risk: float = 0.0

    @model_validator(mode="after")
    def _one_source(self) -> SpreadSection:
        if (self.volatility is None) == (self.quotes is None):
            raise ValueError("give exactly one of volatility (typed in) or quotes (a premium file)")
        return self


def _forward_moments(k: float, s: float, z0: float, t: float, rates: Any, rho: float) -> tuple[float, float]:
    """Mean and variance of ``z_t`` under the ``t``-forward measure (module docstring)."""
    if not isinstance(rates, HullWhiteParams):
        raise ConfigError("parts.spread: the spread option's closed form is written for Hull-White rates")
    a, sig = rates.mean_reversion, rates.volatility
    shift = rho * s * sig / a * ((1 - np.exp(-k * t)) / k - (1 - np.exp(-(k + a) * t)) / (k + a))
    return float(np.exp(-k * t) * z0 - shift), float(s**2 * (1 - np.exp(-2 * k * t)) / (2 * k))


def spread_call_price(k: float, s: float, z0: float, t: float, strike: float, curve: DiscountCurve, rates: Any,
                      rho: float) -> float:
    """``E_Q[D_t (z_t - K)^+] = P(0, t) ((m - K) N(d) + sqrt(v) n(d))`` (module docstring)."""
    m, v = _forward_moments(k, s, z0, t, rates, rho)
    d = (m - strike) / np.sqrt(v)
    return float(curve.discount(t)) * float((m - strike) * stats.norm.cdf(d) + np.sqrt(v) * stats.norm.pdf(d))


def _price_moves(k: float, s: float, z0: float, t: float, strike: float, curve: DiscountCurve, rates: Any,
                 rho: float, rel: float) -> float:
    """The smaller price move for the volatility moved by ``rel`` of itself up and down."""
    at = spread_call_price(k, s, z0, t, strike, curve, rates, rho)
    return min(abs(spread_call_price(k, s * (1 + x), z0, t, strike, curve, rates, rho) - at) for x in (rel, -rel))


def _call_value(t: float, strike: float):
    """The option's deflated payoff per path from the files (``PartInstrument.value``)."""

    def value(times: np.ndarray, columns: dict[str, np.ndarray], deflator: np.ndarray) -> np.ndarray:
        j = time_index(times, t)
        if j is None:
            raise ValueError(f"expiry {t:g} is not an output time")
        return deflator[:, j] * np.maximum(columns[COLUMN][:, j] - strike, 0.0)

    return value


class SpreadKind:
    """The run side of the spread part."""

    section = "spread"
    config_model = SpreadSection

    def drivers(self, section: SpreadSection) -> tuple[str, ...]:
        return (DRIVER,)

    def build(self, section: SpreadSection, context: PartContext) -> GaussianPart:
        if section.volatility is None:
            raise ConfigError("parts.spread: the volatility is fitted from quotes, not built")
        return SpreadFactor(k=section.mean_reversion, s=section.volatility, z0=section.initial)

    # -- the optional hooks: a market file, a fit of its own, its instruments, report and compare rows

    def market_files(self, section: SpreadSection) -> dict[str, str]:
        return {"quotes": section.quotes} if section.quotes is not None else {}

    def calibrate(self, section: SpreadSection, files: dict[str, Any], context: PartContext) -> PartFit:
        if section.quotes is None:
            return PartFit(part=self.build(section, context))
        path = files["quotes"]
        rows = read_number_table(path, ("expiry_years", "strike", "premium"))
        for r in rows:
            if r.values["expiry_years"] <= 0 or r.values["premium"] <= 0:
                raise MarketDataError(f"{path}, data row {r.row}: expiry_years and premium must be positive")
        k, z0, rho = section.mean_reversion, section.initial, context.correlation("rates", DRIVER)

        def price(s: float, r: Any) -> float:
            return spread_call_price(k, s, z0, r.values["expiry_years"], r.values["strike"], context.curve,
                                     context.rates, rho)

        res = optimize.minimize_scalar(lambda s: sum((price(s, r) - r.values["premium"]) ** 2 for r in rows),
                                       bounds=(1e-6, 0.1), method="bounded", options={"xatol": 1e-12})
        s = float(res.x)
        instruments = [{"kind": "call", "expiry": r.values["expiry_years"], "strike": r.values["strike"],
                        "market_price": r.values["premium"], "model_price": price(s, r),
                        "tolerance_price": _price_moves(k, s, z0, r.values["expiry_years"], r.values["strike"],
                                                        context.curve, context.rates, rho, TOL_REL),
                        "material_price": _price_moves(k, s, z0, r.values["expiry_years"], r.values["strike"],
                                                       context.curve, context.rates, rho, MATERIAL_REL)}
                       for r in rows]
        errors = [i["model_price"] - i["market_price"] for i in instruments]
        fit = {"method": "least squares on premiums (Bachelier under the forward measure)", "volatility": s,
               "quotes": len(rows), "rmse_price": float(np.sqrt(np.mean(np.square(errors))))}
        return PartFit(part=SpreadFactor(k=k, s=s, z0=z0), fit=fit, instruments=instruments)

    def instruments(self, records: list[dict[str, Any]], context: PartInstrumentContext) -> list[PartInstrument]:
        return [PartInstrument(
            label=f"spread call {float(r['expiry']):g}y K={float(r['strike']):.2%}", kind="spread_option",
            option="call", expiry=float(r["expiry"]), strike=float(r["strike"]), columns=(COLUMN,),
            value=_call_value(float(r["expiry"]), float(r["strike"])), market_price=float(r["market_price"]),
            model_price=float(r["model_price"]), tolerance=float(r["tolerance_price"]),
            material=float(r["material_price"])) for r in records]

    def fit_text(self, fit: dict[str, Any], fmt: Any) -> str:
        return f"fitted to {fit['quotes']} spread-option premiums, RMSE {fmt.number(fit['rmse_price'])}"

    def compare_quotes(self, instruments: list[dict[str, Any]], fit: dict[str, Any],
                       fmt: Any) -> dict[str, tuple[Any, str]]:
        return {f"spread call {fmt.years(r['expiry'])}y strike {fmt.percent(r['strike'], 2)} (premium)":
                (1e4 * float(r["market_price"]), "bp") for r in instruments}

    def compare_parameters(self, parameters: dict[str, Any]) -> dict[str, tuple[Any, str]]:
        return {"spread mean reversion k": (parameters.get("mean_reversion"), "plain"),
                "spread volatility s": (parameters.get("volatility"), "rate")}

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
        vol = f"s {section.volatility:g}" if section.volatility is not None else f"s fitted to {section.quotes}"
        return f"Ornstein-Uhlenbeck spread factor (k {section.mean_reversion:g}, {vol})"


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
    section = {"mean_reversion": K, "volatility": S, "initial": Z0, "price_of_risk": LAM, **spread}
    data["parts"] = {"spread": {k: v for k, v in section.items() if v is not None}}
    return write_toml(path, data)


def _quote_file(path, vol: float = S_QUOTES):
    """The invented Veldmark spread-option premiums, made by the closed form at ``vol`` on the
    demo's typed-in curve and Hull-White rates (the fit must find ``vol`` again)."""
    cfg = load_config(_config(path.with_suffix(".toml")))
    cal = assemble_calibration(cfg)
    lines = ["expiry_years,strike,premium"] + [
        f"{t:g},{k:g},{spread_call_price(K, vol, Z0, t, k, cal.curve, cal.rates, 0.3):.12g}" for t, k in QUOTES]
    path.write_text("\n".join(lines) + "\n")
    return path


def _fitted_config(root, vol: float = S_QUOTES):
    quotes = _quote_file(root / "veldmark_spread_options.csv", vol)
    return _config(root / "fitted.toml", volatility=None, quotes=quotes.name)


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


# ----------------------------------------------------------------------- the optional hooks


@pytest.fixture(scope="module")
def fitted_run(spread_kind, tmp_path_factory):
    """The library run (validation and report included) of a spread part fitted to its quotes."""
    root = tmp_path_factory.mktemp("fitted")
    cfg_path = _fitted_config(root)
    out = root / "run"
    run_quarter(cfg_path, out, executor=SerialExecutor(), scenarios=2000)
    return cfg_path, out


def test_bachelier_and_the_forward_shift_against_quadrature():
    """The closed form's two pieces against scipy.integrate.quad: the price as ``P(0, T)`` times
    the integral of the payoff over the forward measure's normal density, and the shift's integral."""
    rates, t, strike = HullWhiteParams(mean_reversion=0.05, volatility=0.01), 5.0, 0.0005
    curve = _Flat()
    m, v = _forward_moments(K, S, Z0, t, rates, 0.3)
    quad = integrate.quad(lambda z: (z - strike) * stats.norm.pdf(z, m, np.sqrt(v)), strike, m + 12 * np.sqrt(v))[0]
    price = spread_call_price(K, S, Z0, t, strike, curve, rates, 0.3)
    assert abs(price - float(curve.discount(t)) * quad) < 1e-14
    shift = 0.3 * S * 0.01 * integrate.quad(lambda u: np.exp(-K * (t - u)) * (1 - np.exp(-0.05 * (t - u))) / 0.05,
                                            0.0, t)[0]
    assert abs((np.exp(-K * t) * Z0 - m) - shift) < 1e-15 and shift > 0
    assert abs(v - S**2 * (1 - np.exp(-2 * K * t)) / (2 * K)) < 1e-18


class _Flat:
    """A flat 3% continuously compounded curve (enough for the closed form)."""

    def discount(self, t):
        return np.exp(-0.03 * np.asarray(t, dtype=float))


def test_the_kind_fits_its_volatility_to_its_quote_file(spread_kind, tmp_path):
    cfg = load_config(_fitted_config(tmp_path))
    cal = assemble_calibration(cfg)
    part = cal.plugin_parts["spread"]
    print(f"fitted s {part.s:.10f} (quotes made at {S_QUOTES}); fit {cal.fit['spread']}")
    assert abs(part.s - S_QUOTES) < 1e-8 and cal.fit["spread"]["rmse_price"] < 1e-10
    assert [(i["expiry"], i["strike"]) for i in cal.instruments["spread"]] == [tuple(map(float, q)) for q in QUOTES]
    for inst in cal.instruments["spread"]:  # every quote repriced, tolerance below material
        assert abs(inst["model_price"] - inst["market_price"]) < 1e-10
        assert 0 < inst["tolerance_price"] < inst["material_price"] < inst["market_price"]
    # the file is an input of the run: path and content recorded with the others
    assert cal.inputs["files"]["spread.quotes"]["path"] == "veldmark_spread_options.csv"
    assert len(cal.inputs["files"]["spread.quotes"]["sha256"]) == 64
    # calibration.json keeps fit and instruments where the kind says, and reads back the same part
    out = tmp_path / "run"
    out.mkdir()
    write_calibration(out, cal)
    back = load_calibration(calibration_path(out))
    assert back.plugin_parts == cal.plugin_parts and back.fit["spread"] == cal.fit["spread"]
    assert back.instruments["spread"] == cal.instruments["spread"]


def test_a_bad_quote_file_is_refused_naming_file_row_and_column(spread_kind, tmp_path):
    path = _fitted_config(tmp_path)
    quotes = tmp_path / "veldmark_spread_options.csv"
    quotes.write_text(quotes.read_text().replace("\n2,0,", "\n2,abc,", 1))
    with pytest.raises(MarketDataError, match=r"veldmark_spread_options\.csv, data row 2 .*column 'strike'"):
        assemble_calibration(load_config(path))
    quotes.unlink()
    with pytest.raises(MarketDataError, match=r"veldmark_spread_options\.csv: market-data file not found "
                                              r"\(parts\.spread\.quotes\)"):
        assemble_calibration(load_config(path))
    with pytest.raises(ConfigError, match=r"parts\.spread.*exactly one of volatility"):
        load_config(_config(tmp_path / "both.toml", quotes="x.csv"))


def _spread_z(entry: dict[str, Any]) -> list[float]:
    """The z of every spread cell (market quote and model price, both sets) in a check entry."""
    rows = [r for r in entry["rows"] if str(r["instrument"]).startswith("spread call")]
    return [float(r[key]) for r in rows for key in ("z_score", "z_model")]


def test_the_repricing_cells_of_a_right_part_pass_or_stay_inconclusive(fitted_run):
    """A correct run: no spread cell fails; at 2,000 scenarios the check says inconclusive where
    its power is short (the material deviation is about one standard error)."""
    _, out = fitted_run
    summary = json.loads((out / "validation" / "summary.json").read_text())
    entry = summary["checks"]["market_consistency"]
    z = _spread_z(entry)
    assert len(z) == entry["cells"] == 2 * 2 * len(QUOTES)  # both sets, market quote and model price
    crit = entry["family_critical_z"]
    print(f"right part: spread cells' z {np.round(z, 2).tolist()}, critical {crit:.2f}; "
          f"{entry['inconclusive_cells']} inconclusive")
    assert all(abs(x) <= crit for x in z)
    assert entry["verdict"] in ("pass", "inconclusive")
    # inconclusive exactly where the power rule says so (material effect below crit SE)
    weak = {(c["instrument"], c["measure"], c["reference"]) for c in entry["inconclusive"]}
    assert len(weak) == entry["inconclusive_cells"] and all(i.startswith("spread call") for i, _, _ in weak)
    assert "part plug-in instruments" in entry["material_deviation"]
    table = pd.read_csv(out / "validation" / "market_consistency.csv")
    spread = table[table["type"] == "spread_option"]
    assert len(spread) == 2 * len(QUOTES) and set(spread["measure"]) == {"market_consistent", "real_world"}
    # the report's parameter table says how the part was fitted, and lists its instruments
    report = (out / "validation" / "report.html").read_text(encoding="utf-8")
    assert "fitted to 5 spread-option premiums" in report and "spread call 5y K=0.20%" in report


def test_the_repricing_cells_fail_when_the_simulated_part_is_wrong(fitted_run, tmp_path):
    """The recorded calibration is right, the files are simulated with 1.5 times the fitted
    volatility: the spread cells fail (the other instruments stay unaffected)."""
    cfg_path, _ = fitted_run
    cfg = load_config(cfg_path)
    cal = assemble_calibration(cfg)
    part = cal.plugin_parts["spread"]
    wrong = dataclasses.replace(cal, plugin_parts={"spread": SpreadFactor(k=part.k, s=1.5 * part.s, z0=part.z0)})
    plan = plan_run(cfg)
    out = tmp_path / "run"
    out.mkdir()
    write_calibration(out, cal)
    for measure, batch in plan.tasks():
        generate_part(wrong, plan, measure, batch, out)
    entry = market_consistency_check(load_run_inputs(out)).summary
    z = _spread_z(entry)
    crit = entry["family_critical_z"]
    failing = [x for x in z if abs(x) > crit]
    print(f"wrong part: {len(failing)} of {len(z)} spread cells beyond z = {crit:.2f}; max |z| {max(map(abs, z)):.1f}")
    assert entry["verdict"] == "fail" and failing
    assert all(x > 0 for x in failing)  # too much volatility: the options are too dear


def test_size_and_power_of_the_spread_cells():
    """The check's rule (quote_cells, family critical z) on exact samples of the spread option:
    ``z_T`` drawn from its normal law, rates independent (rho 0) so the deflator is ``P(0, T)``;
    antithetic pairs as sampling units, families of the five quotes' market and model cells.
    Size: families with a false alarm at most 1% nominal + 3 binomial SE; power: a 1.5x
    volatility fails every family at 2,000 scenarios; at 40,000 a conclusive cell passes the
    material deviation (1.1x) at most half of the time (the promise of the power rule)."""
    rng = np.random.default_rng(20261205)
    rates = HullWhiteParams(mean_reversion=0.05, volatility=0.01)
    curve = _Flat()
    ref = np.array([spread_call_price(K, S, Z0, t, k, curve, rates, 0.0) for t, k in QUOTES])
    tol = np.array([_price_moves(K, S, Z0, t, k, curve, rates, 0.0, TOL_REL) for t, k in QUOTES])
    mat = np.array([_price_moves(K, S, Z0, t, k, curve, rates, 0.0, MATERIAL_REL) for t, k in QUOTES])
    crit = family_critical_z(2 * len(QUOTES))

    def families(scale: float, n_pairs: int, n_fam: int) -> tuple[float, float]:
        fails, conclusive, passing = 0, 0, 0
        for _ in range(n_fam):
            e = rng.standard_normal((n_pairs, len(QUOTES)))
            vals = []
            for sign in (1.0, -1.0):
                cols = []
                for j, (t, k) in enumerate(QUOTES):
                    m, v = _forward_moments(K, scale * S, Z0, t, rates, 0.0)
                    z = (m + sign * np.sqrt(v) * e[:, j])[:, None] * np.ones((1, 1))
                    value = _call_value(t, k)(np.array([t]), {COLUMN: z}, np.full((n_pairs, 1), curve.discount(t)))
                    cols.append(value)
                vals.append(np.stack(cols, axis=1))
            units = (vals[0] + vals[1]) / 2
            mc, se = units.mean(axis=0), units.std(axis=0, ddof=1) / np.sqrt(n_pairs)
            pay = np.full(len(QUOTES), n_pairs)
            cells = pd.concat([quote_cells(mc, se, ref, tol, mat, pay), quote_cells(mc, se, ref, 0 * tol, mat, pay)])
            z = np.abs(cells["z_score"].to_numpy())
            fails += bool(np.any(z > crit))
            strong = cells["material_effect"].to_numpy() / cells["statistic_se"].to_numpy() >= crit
            conclusive += int(np.sum(strong))
            passing += int(np.sum(strong & (z <= crit)))
        return fails / n_fam, (passing / conclusive if conclusive else float("nan"))

    size_small, _ = families(1.0, 1000, 400)
    size_large, _ = families(1.0, 20000, 200)
    power_wrong, _ = families(1.5, 1000, 50)
    power_material, passed_material = families(1.1, 20000, 100)
    print(f"size: {size_small:.4f} of 400 families at 2,000 scenarios, {size_large:.4f} of 200 at 40,000 "
          f"(nominal 0.01); 1.5x volatility: {power_wrong:.2f} of families fail at 2,000; 1.1x (material) at 40,000: "
          f"{power_material:.2f} fail, conclusive cells passing {passed_material:.3f}")
    assert size_small <= 0.01 + 3 * np.sqrt(0.01 * 0.99 / 400)
    assert size_large <= 0.01 + 3 * np.sqrt(0.01 * 0.99 / 200)
    assert power_wrong == 1.0
    assert passed_material <= 0.5


def test_pqflow_compare_shows_the_part_quotes_and_parameters(fitted_run, tmp_path):
    """Against a run whose quotes were made at 1.1 times the volatility: the quotes move (in bp
    of premium), the fitted volatility moves, through the kind's compare hooks."""
    from pqflow.report.compare import compare_runs

    _, out = fitted_run
    root = tmp_path / "other"
    root.mkdir()
    other = tmp_path / "other_run"
    run_quarter(_fitted_config(root, 1.1 * S_QUOTES), other, executor=SerialExecutor(), scenarios=400)
    c = compare_runs(out, other)
    quotes = {m.item: m for m in c.inputs if m.group == "parts"}
    assert len(quotes) == len(QUOTES) and all(m.status != "same" for m in quotes.values())
    vol = next(m for m in c.parameters if m.item == "spread volatility s")
    print("compare rows:", sorted(quotes), vol)
    assert vol.status != "same"
    assert any(m.group == "files" and m.item.startswith("spread.quotes") and m.status == "moved" for m in c.inputs)


def test_a_sensitivity_set_carries_the_part_quote_file(spread_kind, tmp_path):
    """A sensitivity's configuration (sensitivities/shocks.py) copies the plug-in's own file
    beside its shocked inputs and points the section at the copy, so the set calibrates."""
    from pqflow.config.schema import SensitivitySection
    from pqflow.sensitivities.shocks import INPUTS_DIR, shocked_config

    cfg = load_config(_fitted_config(tmp_path))
    set_dir = tmp_path / "set"
    shocked = shocked_config(cfg, SensitivitySection(name="up10", curve_shift_bp=10.0), set_dir, source="test")
    rel = shocked.parts["spread"].quotes
    assert rel == f"{INPUTS_DIR}/spread.quotes.csv" and (set_dir / rel).is_file()
    original = read_number_table(tmp_path / "veldmark_spread_options.csv", ("expiry_years", "strike", "premium"))
    assert read_number_table(set_dir / rel, ("expiry_years", "strike", "premium")) == original  # unshocked
    cal = assemble_calibration(shocked)
    assert cal.inputs["files"]["spread.quotes"]["path"] == rel and len(cal.instruments["spread"]) == len(QUOTES)
    assert cal.curve.discount(10.0) < assemble_calibration(cfg).curve.discount(10.0)  # the shock took effect
