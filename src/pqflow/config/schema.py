"""The run configuration: one TOML file, validated before any simulation.

Every table forbids unknown keys, so a typing error in a key name stops the run instead of
being silently ignored. Cross-field rules (curve long enough for the horizon and the longest
bond, antithetic pairs that fit the batches) live in the model validators below.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PrivateAttr,
    SerializeAsAny,
    SerializerFunctionWrapHandler,
    field_validator,
    model_serializer,
    model_validator,
)

from pqflow.config.part_sections import validate_part_sections

__all__ = [
    "RunSection",
    "SignoffSection",
    "CurveSection",
    "MarketDataSection",
    "CurveExtrapolationSection",
    "HullWhiteFitSection",
    "CalibrationSection",
    "HullWhiteSection",
    "EquitySection",
    "RealWorldSection",
    "SetGridSection",
    "SimulationSection",
    "OutputsSection",
    "ValidationSection",
    "ExecutionSection",
    "RatesSection",
    "G2ppSection",
    "G2ppFitSection",
    "IndexSection",
    "IndexSpec",
    "CorrelationsSection",
    "InflationSection",
    "CreditRatingSection",
    "CreditSection",
    "SensitivitySection",
    "SHOCK_KEYS",
    "RunConfig",
]

#: Driver names the rates and inflation parts use in a correlation matrix.
RESERVED_DRIVERS = ("rates", "rates_x", "rates_y", "real_rate", "inflation")


def _list_to_tuple(value: object) -> object:
    return tuple(value) if isinstance(value, list) else value


#: A (low, high) pair: TOML writes it as an array, strict mode wants a tuple.
_Pair = Annotated[tuple[float, float], BeforeValidator(_list_to_tuple)]


def _iso_date(value: object) -> object:
    """A TOML date, or the same date written as an ISO string (``"2026-09-30"``)."""
    if isinstance(value, str):
        try:
            return dt.date.fromisoformat(value.strip())
        except ValueError:
            return value  # refused by strict validation, naming the key
    return value


_Date = Annotated[dt.date, BeforeValidator(_iso_date)]


class _Section(BaseModel):
    # Strict types: a string, a boolean or a float where an integer belongs (``scenarios =
    # "2000"``, ``steps_per_year = true``, ``seed = 2.6e7``) is refused, not converted; integers
    # are accepted for floats. NaN and infinity are refused in every number.
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class RunSection(_Section):
    """Identity of the run."""

    name: str = Field(min_length=1, max_length=80, pattern=r"^[A-Za-z0-9_.\-]+$")
    valuation_date: _Date
    description: str = ""


class SignoffSection(_Section):
    """Names printed on the report's sign-off page (``pqflow report --prepared-by/--reviewed-by``
    override them); recorded in the manifest, not used by any computation."""

    prepared_by: str = Field(default="", max_length=200, pattern=r"^[^\x00-\x1f]*$")
    reviewed_by: str = Field(default="", max_length=200, pattern=r"^[^\x00-\x1f]*$")


class CurveSection(_Section):
    """Today's risk-free curve at pillar maturities (years), interpolated on log discount
    factors. ``kind`` says what ``values`` are."""

    kind: Literal["zero_rates", "discount_factors"]
    compounding: Literal["continuous", "annual"] = "continuous"
    maturities: list[float] = Field(min_length=1)
    values: list[float] = Field(min_length=1)

    @model_validator(mode="after")
    def _pillars(self) -> CurveSection:
        if len(self.maturities) != len(self.values):
            raise ValueError(
                f"maturities has {len(self.maturities)} entries but values has {len(self.values)}"
            )
        if any(m <= 0 for m in self.maturities):
            raise ValueError("maturities must be positive")
        if any(b <= a for a, b in zip(self.maturities, self.maturities[1:], strict=False)):
            raise ValueError("maturities must be strictly increasing")
        if self.kind == "discount_factors" and any(v <= 0 for v in self.values):
            raise ValueError("discount factors must be positive")
        if self.kind == "zero_rates" and any(abs(v) > 0.5 for v in self.values):
            raise ValueError("zero rates are decimals (0.03 for 3%); a value beyond +-50% is a typo")
        return self


class HullWhiteSection(_Section):
    """Hull-White one-factor parameters under the market-consistent measure."""

    mean_reversion: float = Field(gt=0.0, le=5.0)
    volatility: float = Field(gt=0.0, le=0.2)


class RatesSection(_Section):
    """Which short-rate model drives the nominal rates: ``hull_white`` (one factor, driver
    ``rates``) or ``g2pp`` (two correlated Gaussian factors, drivers ``rates_x`` and ``rates_y``;
    ``rates_x`` is the factor with the larger mean reversion when fitted)."""

    model: Literal["hull_white", "g2pp"] = "hull_white"


class G2ppSection(_Section):
    """G2++ parameters under the market-consistent measure: mean reversions ``a``, ``b``,
    volatilities ``sigma``, ``eta`` and the correlation ``rho`` of the two factor shocks."""

    a: float = Field(gt=0.0, le=5.0)
    sigma: float = Field(gt=0.0, le=0.2)
    b: float = Field(gt=0.0, le=5.0)
    eta: float = Field(gt=0.0, le=0.2)
    rho: float = Field(gt=-1.0, lt=1.0)


class EquitySection(_Section):
    """One equity total-return index. With ``market_data.equity_index`` the level and dividend
    yield come from that file; with ``market_data.equity_vols`` the volatility is fitted; with
    ``market_data.correlations`` the correlation comes from the matrix."""

    name: str = Field(min_length=1, max_length=40, pattern=r"^[a-z][a-z0-9_]*$")
    level: float | None = Field(default=None, gt=0.0)
    dividend_yield: float | None = Field(default=None, ge=-0.2, le=0.5)
    volatility: float | None = Field(default=None, gt=0.0, le=2.0)
    correlation_with_rates: float | None = Field(default=None, ge=-1.0, le=1.0)
    #: ``"deterministic"`` (default: a piecewise-constant volatility from the ATMF quotes) or
    #: ``"heston"`` (stochastic variance fitted to the smile in market_data.equity_vols).
    volatility_model: Literal["deterministic", "heston"] = "deterministic"
    #: heston only: the house view's real-world long-run volatility (sets the variance price of
    #: risk; default: none, the real-world variance reverts to the market-consistent level)
    real_world_long_run_volatility: float | None = Field(default=None, gt=0.0, le=2.0)
    #: heston only: substeps of the variance scheme per year
    variance_substeps_per_year: int = Field(default=12, ge=1, le=365)

    @field_validator("correlation_with_rates")
    @classmethod
    def _strict(cls, v: float | None) -> float | None:
        if v is not None and abs(v) >= 1.0:
            raise ValueError(
                "must lie strictly inside (-1, 1): with |rho| = 1 the equity and rate shocks are "
                "one shock and their prices of risk cannot be set apart"
            )
        return v


class MarketDataSection(_Section):
    """The quarter's market-data files (CSV, paths relative to the configuration file).
    ``equity_index`` and ``equity_vols`` also serve the ``[[indices]]`` (property rows carry the
    rental yield in ``dividend_yield``)."""

    curve: str | None = None
    swaptions: str | None = None
    equity_index: str | None = None
    equity_vols: str | None = None
    correlations: str | None = None
    inflation_swaps: str | None = None
    inflation_caps: str | None = None
    credit_spreads: str | None = None


class IndexSection(_Section):
    """A further total-return index beside ``[equity]``: another equity market or property.
    ``level`` and ``income_yield`` (dividend or rental yield) are typed in, or read from the
    row of ``market_data.equity_index`` with this name; ``volatility`` is typed in, or
    bootstrapped from the rows of ``market_data.equity_vols`` with this name (one source each).
    ``risk_premium``: the real-world expected return over cash, per year."""

    name: str = Field(min_length=1, max_length=40, pattern=r"^[a-z][a-z0-9_]*$")
    kind: Literal["equity", "property"]
    level: float | None = Field(default=None, gt=0.0)
    income_yield: float | None = Field(default=None, ge=-0.2, le=0.5)
    volatility: float | None = Field(default=None, gt=0.0, le=2.0)
    risk_premium: float = Field(ge=-0.2, le=0.3)
    #: as ``equity.volatility_model``
    volatility_model: Literal["deterministic", "heston"] = "deterministic"
    #: heston only: the house view's real-world long-run volatility (sets the variance price of
    #: risk; default: none, the real-world variance reverts to the market-consistent level)
    real_world_long_run_volatility: float | None = Field(default=None, gt=0.0, le=2.0)
    #: heston only: substeps of the variance scheme per year
    variance_substeps_per_year: int = Field(default=12, ge=1, le=365)

    @model_validator(mode="after")
    def _pair(self) -> IndexSection:
        if (self.level is None) != (self.income_yield is None):
            raise ValueError("level and income_yield go together (both typed in, or both from "
                             "market_data.equity_index)")
        if self.name in RESERVED_DRIVERS:
            raise ValueError(f"{self.name!r} names a rates or inflation driver; choose another index name")
        return self


@dataclass(frozen=True, kw_only=True)
class IndexSpec:
    """One total-return index of a run in the one form the calibration reads: ``[equity]``
    (the core index, always first) and each ``[[indices]]`` entry, normalised at one place
    (:attr:`RunConfig.index_specs`). ``risk_premium`` is the core equity's
    ``real_world.equity_risk_premium``; ``key`` and ``yield_key`` name the configuration keys
    in error messages (``equity`` / ``dividend_yield``, ``indices.<name>`` / ``income_yield``)."""

    name: str
    kind: str
    level: float | None
    income_yield: float | None
    volatility: float | None
    risk_premium: float
    volatility_model: str
    real_world_long_run_volatility: float | None
    variance_substeps_per_year: int
    core: bool
    key: str
    yield_key: str

    @classmethod
    def core_equity(cls, section: EquitySection, risk_premium: float) -> IndexSpec:
        return cls(name=section.name, kind="equity", level=section.level, income_yield=section.dividend_yield,
                   volatility=section.volatility, risk_premium=risk_premium,
                   volatility_model=section.volatility_model,
                   real_world_long_run_volatility=section.real_world_long_run_volatility,
                   variance_substeps_per_year=section.variance_substeps_per_year, core=True, key="equity",
                   yield_key="dividend_yield")

    @classmethod
    def further(cls, section: IndexSection) -> IndexSpec:
        return cls(name=section.name, kind=section.kind, level=section.level, income_yield=section.income_yield,
                   volatility=section.volatility, risk_premium=section.risk_premium,
                   volatility_model=section.volatility_model,
                   real_world_long_run_volatility=section.real_world_long_run_volatility,
                   variance_substeps_per_year=section.variance_substeps_per_year, core=False,
                   key=f"indices.{section.name}", yield_key="income_yield")


class CorrelationsSection(_Section):
    """A typed-in correlation matrix of the drivers (instead of ``market_data.correlations``):
    ``drivers`` names the rows and columns in order (``rates``, each index by name,
    ``real_rate`` and ``inflation`` with ``[inflation]``)."""

    drivers: list[str] = Field(min_length=2)
    matrix: list[list[float]]

    @model_validator(mode="after")
    def _square(self) -> CorrelationsSection:
        n = len(self.drivers)
        if len(set(self.drivers)) != n:
            raise ValueError("drivers must not repeat")
        if len(self.matrix) != n or any(len(r) != n for r in self.matrix):
            raise ValueError(f"matrix must be {n} x {n}, one row and column per driver")
        return self


class InflationSection(_Section):
    """Jarrow-Yildirim inflation: a Hull-White real short rate and a lognormal consumer price
    index. The real curve comes from zero-coupon inflation swap rates (``market_data.
    inflation_swaps``, or typed in as ``swap_maturities`` / ``swap_rates``), with the breakeven
    rate held flat beyond the last quote. Real world: ``real_rate_price_of_risk`` moves the real
    short rate's drift, ``inflation_drift_adjustment`` adds to the expected growth rate of the
    CPI per year (its price of risk is the adjustment over the inflation volatility). ``fit``
    names the volatility parameters fitted to year-on-year caps and floors
    (``market_data.inflation_caps``); the typed values are then starting points."""

    real_mean_reversion: float = Field(gt=0.0, le=5.0)
    real_volatility: float = Field(gt=0.0, le=0.2)
    inflation_volatility: float = Field(gt=0.0, le=0.5)
    cpi_base: float = Field(default=100.0, gt=0.0)
    real_bond_maturities: list[float] = Field(default_factory=list, max_length=60)
    swap_maturities: list[float] | None = None
    swap_rates: list[float] | None = None
    real_rate_price_of_risk: float = Field(default=0.0, ge=-5.0, le=5.0)
    inflation_drift_adjustment: float = Field(default=0.0, ge=-0.1, le=0.1)
    fit: list[Literal["inflation_volatility", "real_mean_reversion", "real_volatility"]] = Field(default_factory=list)

    @model_validator(mode="after")
    def _swaps(self) -> InflationSection:
        if (self.swap_maturities is None) != (self.swap_rates is None):
            raise ValueError("swap_maturities and swap_rates go together")
        if self.swap_maturities is not None:
            if self.swap_rates is None:
                raise ValueError("swap_maturities and swap_rates go together")
            if len(self.swap_maturities) != len(self.swap_rates) or not self.swap_maturities:
                raise ValueError("swap_maturities and swap_rates need the same, non-zero number of entries")
        if any(m <= 0 for m in self.real_bond_maturities) \
                or len(set(self.real_bond_maturities)) != len(self.real_bond_maturities):
            raise ValueError("real_bond_maturities must be positive and distinct")
        return self


class CreditRatingSection(_Section):
    """One rating's CIR++ default intensity. The spread curve (zero-coupon spreads over the
    risk-free zero rates, bp) comes from ``market_data.credit_spreads`` or is typed in as
    ``spread_maturities`` / ``spreads_bp``. The CIR parameters are given; those named in
    ``fit`` are starting values, fitted so the CIR part carries the curve's shape (the shift
    reprices every spread exactly either way). Real world, at most one of: ``price_of_risk``
    theta (``W^Q = W^P + int theta sqrt(y) ds``, so ``kappa^P = kappa - nu theta``: negative
    values make real-world intensities lower, the usual credit risk premium), or
    ``real_world_long_run_mean``, the real-world long-run level of the CIR factor (e.g. from
    historical default rates), from which theta follows after the fit."""

    name: str = Field(min_length=1, max_length=20, pattern=r"^[A-Za-z][A-Za-z0-9_]*$")
    recovery: float = Field(ge=0.0, lt=1.0)
    mean_reversion: float = Field(gt=0.0, le=5.0)
    long_run_mean: float = Field(ge=0.0, le=1.0)
    volatility: float = Field(ge=0.0, le=2.0)
    initial: float = Field(ge=0.0, le=1.0)
    fit: list[Literal["mean_reversion", "long_run_mean", "volatility", "initial"]] = Field(default_factory=list)
    price_of_risk: float = Field(default=0.0, ge=-50.0, le=50.0)
    real_world_long_run_mean: float | None = Field(default=None, gt=0.0, le=1.0)
    spread_maturities: list[float] | None = None
    spreads_bp: list[float] | None = None

    @model_validator(mode="after")
    def _spreads(self) -> CreditRatingSection:
        if self.real_world_long_run_mean is not None and self.price_of_risk != 0.0:
            raise ValueError("give at most one of price_of_risk and real_world_long_run_mean")
        if self.real_world_long_run_mean is not None and self.volatility == 0.0:
            raise ValueError("real_world_long_run_mean needs a positive volatility (with nu = 0 the measures agree)")
        if (self.spread_maturities is None) != (self.spreads_bp is None):
            raise ValueError("spread_maturities and spreads_bp go together")
        if self.spread_maturities is not None:
            if self.spreads_bp is None:
                raise ValueError("spread_maturities and spreads_bp go together")
            if len(self.spread_maturities) != len(self.spreads_bp) or not self.spread_maturities:
                raise ValueError("spread_maturities and spreads_bp need the same, non-zero number of entries")
        return self


class CreditSection(_Section):
    """Credit spreads by rating (CIR++ intensities, independent of rates and indices in this
    version; recovery of market value). ``bond_maturities``: the defaultable zero-coupon bonds
    to write (each must also be an ``outputs.bond_maturities`` entry). The square-root process
    is simulated with full-truncation Euler on ``substeps_per_year`` substeps a year (rounded up
    to whole substeps per output step; the bias is stated in the README)."""

    bond_maturities: list[float] = Field(min_length=1, max_length=30)
    substeps_per_year: int = Field(default=12, ge=1, le=365)
    ratings: list[CreditRatingSection] = Field(min_length=1, max_length=20)

    @model_validator(mode="after")
    def _unique(self) -> CreditSection:
        names = [r.name for r in self.ratings]
        if len(set(names)) != len(names):
            raise ValueError(f"rating names must not repeat: {names}")
        if any(m <= 0 for m in self.bond_maturities) or len(set(self.bond_maturities)) != len(self.bond_maturities):
            raise ValueError("bond_maturities must be positive and distinct")
        return self


class CurveExtrapolationSection(_Section):
    """Extrapolation of the market curve, as the European insurance regulator documents it:
    ``method = "smith_wilson"`` (beyond the last liquid point) or ``"last_liquid_forward"`` (the
    Solvency II review's method: constant forwards between the liquid maturities, then from the
    last liquid forward rate to the UFR beyond the first smoothing point; the weights come from the
    curve file's ``llfr_weight`` column). ``ultimate_forward_rate`` is annually compounded; read
    the current value from the regulator's publication.

    Smith-Wilson only: ``last_liquid_point``, ``convergence_tolerance_bp``, ``alpha_floor``,
    ``convergence_point_years``. Last liquid forward only: ``alpha`` (the convergence parameter)
    or ``phase_in_year`` (the phasing-in table's value for that year), ``currency`` (``"SEK"``
    selects the Swedish krona's values), ``coupon_frequency`` of the par swaps."""

    method: Literal["smith_wilson", "last_liquid_forward"] = "smith_wilson"
    ultimate_forward_rate: float = Field(ge=-0.05, le=0.2)
    last_liquid_point: float | None = Field(default=None, gt=0.0)
    convergence_tolerance_bp: float = Field(default=1.0, gt=0.0, le=100.0)
    alpha_floor: float = Field(default=0.05, gt=0.0, le=1.0)
    convergence_point_years: float | None = Field(default=None, gt=0.0)
    credit_risk_adjustment_bp: float = Field(default=0.0, ge=-100.0, le=100.0)
    long_end_years: float = Field(default=150.0, gt=0.0, le=300.0)
    alpha: float | None = Field(default=None, gt=0.0, le=5.0)
    phase_in_year: int | None = Field(default=None, ge=2027, le=2100)
    currency: str | None = Field(default=None, pattern=r"^[A-Za-z]{3}$")
    coupon_frequency: Literal[1, 2, 4, 12] = 1

    @model_validator(mode="after")
    def _method_keys(self) -> CurveExtrapolationSection:
        # a key "applies" when it differs from its default (a dumped and re-read section carries
        # every default, so being present is not enough)
        fields = type(self).model_fields
        given = {k for k in fields if getattr(self, k) != fields[k].default}
        sw_only = ("last_liquid_point", "convergence_tolerance_bp", "alpha_floor", "convergence_point_years")
        llfr_only = ("alpha", "phase_in_year", "currency", "coupon_frequency")
        other = llfr_only if self.method == "smith_wilson" else sw_only
        wrong = [k for k in other if k in given]
        if wrong:
            raise ValueError(f"{', '.join(wrong)} do(es) not apply to method = {self.method!r}")
        if self.alpha is not None and self.phase_in_year is not None:
            raise ValueError("give alpha or phase_in_year, not both")
        return self


class HullWhiteFitSection(_Section):
    """How Hull-White ``(a, sigma)`` is fitted to the swaption quotes."""

    objective: Literal["implied_vol", "price"] = "implied_vol"
    mean_reversion_bounds: _Pair = (1e-3, 1.0)
    volatility_bounds: _Pair = (1e-4, 0.1)
    fix_mean_reversion: float | None = Field(default=None, gt=0.0, le=5.0)

    @model_validator(mode="after")
    def _bounds(self) -> HullWhiteFitSection:
        for key, (lo, hi) in (("mean_reversion_bounds", self.mean_reversion_bounds),
                              ("volatility_bounds", self.volatility_bounds)):
            if not 0.0 < lo < hi:
                raise ValueError(f"{key} must satisfy 0 < lower < upper, got [{lo:g}, {hi:g}]")
        return self


class G2ppFitSection(_Section):
    """How G2++ ``(a, sigma, b, eta, rho)`` is fitted to the swaption quotes (weighted least
    squares on the whole grid, Brigo and Mercurio's one-dimensional integral per swaption).
    ``initial``: the starting point (e.g. last quarter's parameters; the problem is not convex);
    ``fixed``: parameters held at given values (e.g. ``{ rho = -0.7 }`` when the quotes cannot
    separate the factors' correlation)."""

    objective: Literal["implied_vol", "price"] = "implied_vol"
    initial: G2ppSection | None = None
    fixed: dict[Literal["a", "sigma", "b", "eta", "rho"], float] = Field(default_factory=dict)
    mean_reversion_bounds: _Pair = (1e-4, 3.0)
    volatility_bounds: _Pair = (1e-5, 0.2)

    @model_validator(mode="after")
    def _bounds(self) -> G2ppFitSection:
        for key, (lo, hi) in (("mean_reversion_bounds", self.mean_reversion_bounds),
                              ("volatility_bounds", self.volatility_bounds)):
            if not 0.0 < lo < hi:
                raise ValueError(f"{key} must satisfy 0 < lower < upper, got [{lo:g}, {hi:g}]")
        return self


class HestonFitSection(_Section):
    """How the Heston parameters of an index with ``volatility_model = "heston"`` are fitted to
    its smile: ``[lower, upper]`` bounds of each parameter and the starting point (weights come
    from the ``weight`` column of market_data.equity_vols)."""

    v0_bounds: _Pair = (1e-4, 1.0)
    kappa_bounds: _Pair = (0.05, 10.0)
    theta_bounds: _Pair = (1e-4, 1.0)
    xi_bounds: _Pair = (0.01, 2.0)
    rho_bounds: _Pair = (-0.99, 0.99)
    initial: dict[Literal["v0", "kappa", "theta", "xi", "rho"], float] = Field(default_factory=dict)

    @model_validator(mode="after")
    def _bounds(self) -> HestonFitSection:
        defaults = {"v0": 0.04, "kappa": 1.5, "theta": 0.04, "xi": 0.5, "rho": -0.5}
        for name in ("v0", "kappa", "theta", "xi", "rho"):
            lo, hi = getattr(self, f"{name}_bounds")
            floor = -1.0 if name == "rho" else 0.0
            top = 1.0 if name == "rho" else float("inf")
            if not floor < lo < hi < top:
                raise ValueError(
                    f"{name}_bounds must satisfy {floor:g} < lower < upper{' < 1' if name == 'rho' else ''}, "
                    f"got [{lo:g}, {hi:g}]"
                )
            x0 = self.initial.get(name, min(max(defaults[name], lo), hi))
            if not lo <= x0 <= hi:
                raise ValueError(f"initial {name} = {x0:g} lies outside {name}_bounds [{lo:g}, {hi:g}]")
        return self

    def lower_upper_initial(self) -> tuple[tuple[float, ...], tuple[float, ...], tuple[float, ...]]:
        defaults = {"v0": 0.04, "kappa": 1.5, "theta": 0.04, "xi": 0.5, "rho": -0.5}
        names = ("v0", "kappa", "theta", "xi", "rho")
        lower = tuple(getattr(self, f"{n}_bounds")[0] for n in names)
        upper = tuple(getattr(self, f"{n}_bounds")[1] for n in names)
        initial = tuple(
            self.initial.get(n, min(max(defaults[n], lo), hi))  # type: ignore[call-overload]
            for n, lo, hi in zip(names, lower, upper, strict=True)
        )
        return lower, upper, initial


class CalibrationSection(_Section):
    """Calibration choices."""

    correlation_repair: Literal["reject", "higham"] = "reject"
    hull_white: HullWhiteFitSection = HullWhiteFitSection()
    g2pp: G2ppFitSection = G2ppFitSection()
    heston: HestonFitSection = HestonFitSection()


class RealWorldSection(_Section):
    """The house view that moves the real-world drifts (volatilities stay shared).

    Rates, one of three forms:

    * ``rates_market_price_of_risk``: a constant price of risk;
    * ``target_short_rate`` (+ ``target_year``, default the horizon): the real-world expected
      short rate reached at that year, from a constant price of risk;
    * ``long_run_level`` with ``half_life_years`` (or ``reversion_speed``): the real-world
      expected ``target`` (the short rate, or the zero yield of ``target_maturity`` years) moves
      from today's value towards the long-run level, ``m(t) = m0 + (L - m0)(1 - e^{-k t})``,
      through a piecewise-constant (monthly) price of risk that meets the path exactly at every
      month end.

    Equity: ``equity_risk_premium`` over cash. ``rates_volatility`` / ``equity_volatility`` may be
    stated to confirm the real-world volatilities; if they differ from the market-consistent ones
    the two measures are not equivalent and the run stops rather than write meaningless weights.
    """

    rates_market_price_of_risk: float | None = Field(default=None, ge=-5.0, le=5.0)
    target_short_rate: float | None = Field(default=None, ge=-0.2, le=0.5)
    target_year: float | None = Field(default=None, gt=0.0)
    long_run_level: float | None = Field(default=None, ge=-0.2, le=0.5)
    half_life_years: float | None = Field(default=None, gt=0.0, le=200.0)
    reversion_speed: float | None = Field(default=None, gt=0.0, le=50.0)
    target: Literal["short_rate", "zero_yield"] = "short_rate"
    target_maturity: float | None = Field(default=None, gt=0.0, le=100.0)
    equity_risk_premium: float = Field(ge=-0.2, le=0.3)
    rates_volatility: float | None = Field(default=None, gt=0.0)
    equity_volatility: float | None = Field(default=None, gt=0.0)

    @model_validator(mode="after")
    def _one_rate_view(self) -> RealWorldSection:
        given = (
            (self.rates_market_price_of_risk is not None)
            + (self.target_short_rate is not None)
            + (self.long_run_level is not None)
        )
        if given != 1:
            raise ValueError(
                "give exactly one of rates_market_price_of_risk, target_short_rate or long_run_level"
            )
        if self.target_year is not None and self.target_short_rate is None:
            raise ValueError("target_year goes with target_short_rate")
        if self.long_run_level is not None:
            if (self.half_life_years is None) == (self.reversion_speed is None):
                raise ValueError("long_run_level needs exactly one of half_life_years or reversion_speed")
            if self.target == "zero_yield" and self.target_maturity is None:
                raise ValueError("target = 'zero_yield' needs target_maturity (years)")
        else:
            for key in ("half_life_years", "reversion_speed", "target_maturity"):
                if getattr(self, key) is not None:
                    raise ValueError(f"{key} goes with long_run_level")
            if self.target != "short_rate":
                raise ValueError("target goes with long_run_level")
        return self

    @property
    def speed(self) -> float | None:
        if self.reversion_speed is not None:
            return self.reversion_speed
        if self.half_life_years is not None:
            import math

            return math.log(2.0) / self.half_life_years
        return None


#: Fewest scenarios a set may have: the checks estimate standard errors from the scenarios.
MIN_SCENARIOS = 20


class SetGridSection(_Section):
    """Per-set overrides of the grid: a standard quarter often wants a monthly real-world set
    and an annual, longer market-consistent one."""

    scenarios: int | None = Field(default=None, gt=0, le=10_000_000)
    horizon_years: float | None = Field(default=None, gt=0.0, le=150.0)
    steps_per_year: int | None = Field(default=None, gt=0, le=365)


class SimulationSection(_Section):
    """Size and randomness of both scenario sets; ``[simulation.real_world]`` and
    ``[simulation.market_consistent]`` may override ``scenarios``, ``horizon_years`` and
    ``steps_per_year`` for one set."""

    scenarios: int = Field(gt=0, le=10_000_000)
    horizon_years: float = Field(gt=0.0, le=150.0)
    steps_per_year: int = Field(gt=0, le=365)
    seed: int = Field(ge=0, lt=2**63)
    batch_size: int = Field(gt=0, le=1_000_000)
    antithetic: bool
    real_world: SetGridSection | None = None
    market_consistent: SetGridSection | None = None

    def grid(self, measure: str) -> tuple[int, float, int]:
        """``(scenarios, horizon_years, steps_per_year)`` of one set."""
        over = getattr(self, measure) or SetGridSection()
        return (
            over.scenarios if over.scenarios is not None else self.scenarios,
            over.horizon_years if over.horizon_years is not None else self.horizon_years,
            over.steps_per_year if over.steps_per_year is not None else self.steps_per_year,
        )

    @property
    def max_horizon_years(self) -> float:
        return max(self.grid(m)[1] for m in ("real_world", "market_consistent"))

    @model_validator(mode="after")
    def _grid(self) -> SimulationSection:
        for measure in ("real_world", "market_consistent"):
            scenarios, horizon, spy = self.grid(measure)
            where = "" if getattr(self, measure) is None else f" (simulation.{measure})"
            steps = horizon * spy
            if abs(steps - round(steps)) > 1e-9:
                raise ValueError(
                    f"horizon_years x steps_per_year = {steps:g} is not a whole number of steps{where}"
                )
            if scenarios < MIN_SCENARIOS:
                raise ValueError(
                    f"scenarios = {scenarios}{where} is too few: each set needs at least {MIN_SCENARIOS} "
                    f"scenarios (with antithetic pairs, {MIN_SCENARIOS // 2} independent pairs), since "
                    "every check's standard error and skewness correction is estimated from the "
                    "scenarios themselves (common practice: at least 10 independent observations)"
                )
            if self.antithetic and (scenarios % 2 or self.batch_size % 2):
                raise ValueError(f"with antithetic = true, scenarios and batch_size must be even{where}")
        return self

    @property
    def n_steps(self) -> int:
        return int(round(self.horizon_years * self.steps_per_year))


class OutputsSection(_Section):
    """What the scenario files carry. ``columns``: optional list of the columns to write (names
    or shell-style patterns such as ``"zcb_*"``, ``"spread_*"``); ``short_rate``,
    ``cash_account``, ``deflator`` and the density are always written. Without it, every
    column of the configured models is written."""

    bond_maturities: list[float] = Field(min_length=1, max_length=60)
    columns: list[str] | None = Field(default=None, min_length=1)

    @field_validator("bond_maturities")
    @classmethod
    def _maturities(cls, v: list[float]) -> list[float]:
        if any(m <= 0 for m in v):
            raise ValueError("bond maturities must be positive")
        if len(set(v)) != len(v):
            raise ValueError("bond maturities must not repeat")
        return sorted(v)


class ValidationSection(_Section):
    """Tolerances of the checks written to ``validation/``."""

    ess_warning_share: float = Field(default=0.1, gt=0.0, lt=1.0)


class SensitivitySection(_Section):
    """One sensitivity (or stress) set: shocks applied to the market data before calibration,
    simulated with the base run's seeds (common random numbers) into ``sensitivities/<name>/``.

    Shocks (at least one): ``curve_shift_bp`` (added to every input rate of the curve: par or
    zero rates, or the annually compounded zero rate of a discount factor; typed-in pillars
    too), ``curve_relative_shift`` (a CSV ``maturity_years, relative_shift`` read relative to
    the configuration: each input rate ``r(t)`` becomes ``r(t) (1 + s(t))``, ``s`` linear
    between the rows and flat beyond them), ``ufr_shift_bp``, ``swaption_vol_shift_bp`` (normal
    volatility quotes), ``swaption_vol_relative`` (every quote times ``1 + x``),
    ``equity_vol_shift_points`` (every index's volatility, implied or typed in, plus ``x / 100``),
    ``index_level_shift_pct`` (every index level times ``1 + x / 100``), ``credit_spread_shift_bp``
    (every rating's spreads). ``keep_volatility_parameters``: keep the base calibration's
    volatility parameters and refit the curve (and what hangs on it: the house view's prices of
    risk, the real curve) only; then only curve and UFR shocks are allowed. ``real_world``: also
    write a real-world set (default: the market-consistent set only)."""

    name: str = Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")
    description: str | None = Field(default=None, max_length=500)
    curve_shift_bp: float | None = Field(default=None, ge=-2000.0, le=2000.0)
    curve_relative_shift: str | None = Field(default=None, min_length=1)
    ufr_shift_bp: float | None = Field(default=None, ge=-1000.0, le=1000.0)
    swaption_vol_shift_bp: float | None = Field(default=None, ge=-500.0, le=500.0)
    swaption_vol_relative: float | None = Field(default=None, gt=-1.0, le=10.0)
    equity_vol_shift_points: float | None = Field(default=None, ge=-100.0, le=100.0)
    index_level_shift_pct: float | None = Field(default=None, gt=-100.0, le=1000.0)
    credit_spread_shift_bp: float | None = Field(default=None, ge=-1000.0, le=5000.0)
    keep_volatility_parameters: bool = False
    real_world: bool = False

    @model_validator(mode="after")
    def _shocks(self) -> SensitivitySection:
        shocks = [k for k in SHOCK_KEYS if getattr(self, k) is not None]
        if not shocks:
            raise ValueError(f"sensitivity {self.name!r}: give at least one shock ({', '.join(SHOCK_KEYS)})")
        if self.keep_volatility_parameters:
            other = [k for k in shocks if k not in ("curve_shift_bp", "curve_relative_shift", "ufr_shift_bp")]
            if other:
                raise ValueError(
                    f"sensitivity {self.name!r}: keep_volatility_parameters shocks the curve only; "
                    f"{', '.join(other)} cannot go with it"
                )
        return self


SHOCK_KEYS = (
    "curve_shift_bp", "curve_relative_shift", "ufr_shift_bp", "swaption_vol_shift_bp", "swaption_vol_relative",
    "equity_vol_shift_points", "index_level_shift_pct", "credit_spread_shift_bp",
)


class ExecutionSection(_Section):
    """How the parts are scheduled; the bytes written never depend on it.

    ``runner = "threads"`` (default): a thread pool of ``workers`` threads in the run's process.
    ``runner = "dask"``: a local Dask cluster of ``workers`` single-threaded worker processes,
    or, with ``dask_address``, an existing Dask scheduler (``"tcp://host:8786"``).
    """

    runner: Literal["threads", "dask"] = "threads"
    workers: int = Field(default=2, ge=1, le=64)
    dask_address: str | None = Field(default=None, min_length=1)

    @model_validator(mode="after")
    def _address_needs_dask(self) -> ExecutionSection:
        if self.dask_address is not None and self.runner != "dask":
            raise ValueError('dask_address goes with runner = "dask"')
        return self


class RunConfig(_Section):
    """A whole run configuration.

    Parameters are either typed in (``[curve]``, ``[hull_white]``, the equity volatility and
    correlation) or fitted from the files of ``[market_data]``; each quantity has exactly one
    source.
    """

    run: RunSection
    curve: CurveSection | None = None
    rates: RatesSection = RatesSection()
    hull_white: HullWhiteSection | None = None
    g2pp: G2ppSection | None = None
    equity: EquitySection
    real_world: RealWorldSection
    simulation: SimulationSection
    outputs: OutputsSection
    market_data: MarketDataSection | None = None
    curve_extrapolation: CurveExtrapolationSection | None = None
    indices: list[IndexSection] = Field(default_factory=list, max_length=20)
    correlations: CorrelationsSection | None = None
    inflation: InflationSection | None = None
    credit: CreditSection | None = None
    calibration: CalibrationSection = CalibrationSection()
    validation: ValidationSection = ValidationSection()
    execution: ExecutionSection = ExecutionSection()
    #: ``[density_blocks]``: block name -> the drivers whose states carry a restricted density
    #: (``q_density_<name>`` / ``p_density_<name>``). Absent: ``rates``, ``rates_<index>`` per
    #: index, ``rates_inflation``, ``credit_<rating>`` and ``rates_<section>`` per part plug-in;
    #: an empty table writes none. Under G2++ the driver name ``rates`` stands for both rate drivers.
    density_blocks: dict[str, list[str]] | None = None
    sensitivities: list[SensitivitySection] = Field(default_factory=list, max_length=50)
    signoff: SignoffSection | None = None
    #: ``[parts.<name>]``: the sections of registered part plug-ins (:mod:`pqflow.models.parts`),
    #: each validated by its kind's model; an unregistered name is refused naming the section.
    parts: Annotated[dict[str, SerializeAsAny[BaseModel]], BeforeValidator(validate_part_sections)] = Field(
        default_factory=dict)

    _base_dir: Path = PrivateAttr(default=Path("."))

    @field_validator("density_blocks")
    @classmethod
    def _block_names(cls, v: dict[str, list[str]] | None) -> dict[str, list[str]] | None:
        for name, drivers in (v or {}).items():
            if not re.match(r"^[A-Za-z][A-Za-z0-9_]*$", name):
                raise ValueError(f"block name {name!r} must be letters, digits and _, starting with a letter")
            if not drivers:
                raise ValueError(f"block {name!r} lists no drivers")
            if len(set(drivers)) != len(drivers):
                raise ValueError(f"block {name!r} repeats a driver")
        return v

    @model_serializer(mode="wrap")
    def _without_empty_parts(self, handler: SerializerFunctionWrapHandler) -> dict[str, Any]:
        # no [parts] table when no part plug-in is configured: the dump (hashes, fingerprints,
        # written configurations) of every configuration without one is what it was before
        data: dict[str, Any] = handler(self)
        if not data.get("parts"):
            data.pop("parts", None)
        return data

    @property
    def index_specs(self) -> tuple[IndexSpec, ...]:
        """Every total-return index of the run, the core equity (``[equity]``) first, then the
        ``[[indices]]`` in order: the one place ``[equity]`` joins the index list."""
        return (IndexSpec.core_equity(self.equity, self.real_world.equity_risk_premium),
                *(IndexSpec.further(i) for i in self.indices))

    @property
    def base_dir(self) -> Path:
        """Folder that relative market-data paths are read from (the configuration's folder)."""
        return self._base_dir

    def market_file(self, kind: str) -> Path | None:
        md = self.market_data
        rel = getattr(md, kind) if md is not None else None
        return None if rel is None else (self._base_dir / rel)

    @model_validator(mode="after")
    def _sources(self) -> RunConfig:
        md = self.market_data or MarketDataSection()
        pairs = [
            ("curve", self.curve is not None, "market_data.curve", md.curve is not None),
            (self.rates.model, (self.hull_white if self.rates.model == "hull_white" else self.g2pp) is not None,
             "market_data.swaptions", md.swaptions is not None),
            ("equity.volatility", self.equity.volatility is not None, "market_data.equity_vols",
             md.equity_vols is not None),
            ("equity.correlation_with_rates or [correlations]", self.equity.correlation_with_rates is not None
             or self.correlations is not None, "market_data.correlations", md.correlations is not None),
            ("equity.level", self.equity.level is not None, "market_data.equity_index", md.equity_index is not None),
            ("equity.dividend_yield", self.equity.dividend_yield is not None, "market_data.equity_index",
             md.equity_index is not None),
        ]
        for typed_key, has_typed, fitted, has_fitted in pairs:
            if has_typed == has_fitted:
                raise ValueError(
                    f"give exactly one of {typed_key} (typed in) or {fitted} (from a market-data file)"
                    + ("; both are given" if has_typed else "; neither is given")
                )
        if (md.curve is not None) != (self.curve_extrapolation is not None):
            raise ValueError("market_data.curve and [curve_extrapolation] go together")
        other = "g2pp" if self.rates.model == "hull_white" else "hull_white"
        if getattr(self, other) is not None:
            raise ValueError(f"[{other}] is given but rates.model is {self.rates.model!r}")
        if self.rates.model == "g2pp" and self.equity.correlation_with_rates is not None:
            raise ValueError(
                "with rates.model = \"g2pp\" the equity correlates with two rate drivers (rates_x, "
                "rates_y): give the matrix in market_data.correlations or [correlations] instead of "
                "equity.correlation_with_rates"
            )
        if self.equity.correlation_with_rates is not None and self.correlations is not None:
            raise ValueError("give the correlations once: equity.correlation_with_rates or [correlations], not both")
        if (self.indices or self.inflation is not None) and self.equity.correlation_with_rates is not None:
            raise ValueError(
                "with [[indices]] or [inflation] every pair of drivers needs a correlation: give the "
                "full matrix in market_data.correlations or [correlations] instead of "
                "equity.correlation_with_rates"
            )
        names = [self.equity.name, *(i.name for i in self.indices)]
        if len(set(names)) != len(names):
            raise ValueError(f"index names must not repeat ([equity] and [[indices]]): {names}")
        if self.equity.name in RESERVED_DRIVERS:
            raise ValueError(f"equity.name {self.equity.name!r} names a rates or inflation driver; choose another name")
        # data for a model that is not configured, and models without their data
        if md.inflation_swaps is not None and self.inflation is None:
            raise ValueError("market_data.inflation_swaps is given but [inflation] is not configured")
        if md.inflation_caps is not None and (self.inflation is None or not self.inflation.fit):
            raise ValueError(
                "market_data.inflation_caps is given but nothing is fitted to it: configure [inflation] "
                "with fit = [...] (inflation_volatility, real_mean_reversion, real_volatility)"
            )
        if self.inflation is not None and self.inflation.fit:
            if md.inflation_caps is None:
                raise ValueError("inflation.fit needs year-on-year cap or floor quotes in market_data.inflation_caps")
            if self.rates.model != "hull_white":
                raise ValueError(
                    "inflation.fit prices year-on-year caps in the Jarrow-Yildirim closed form with "
                    "Hull-White nominal rates; under G2++ type the inflation volatilities in"
                )
        if md.credit_spreads is not None and self.credit is None:
            raise ValueError("market_data.credit_spreads is given but [credit] is not configured")
        if self.inflation is not None:
            typed = self.inflation.swap_maturities is not None
            if typed == (md.inflation_swaps is not None):
                raise ValueError(
                    "give exactly one of inflation.swap_maturities/swap_rates (typed in) or "
                    "market_data.inflation_swaps (from a market-data file)"
                    + ("; both are given" if typed else "; neither is given")
                )
        if self.credit is not None:
            for r in self.credit.ratings:
                typed = r.spread_maturities is not None
                if typed == (md.credit_spreads is not None):
                    raise ValueError(
                        f"credit rating {r.name}: give exactly one of spread_maturities/spreads_bp "
                        "(typed in) or market_data.credit_spreads (from a market-data file)"
                        + ("; both are given" if typed else "; neither is given")
                    )
            missing = [m for m in self.credit.bond_maturities if m not in self.outputs.bond_maturities]
            if missing:
                raise ValueError(
                    f"credit.bond_maturities {missing} are not in outputs.bond_maturities: each "
                    "defaultable bond needs the risk-free bond of the same maturity"
                )
        for label, model, typed_vol in (("equity", self.equity.volatility_model, self.equity.volatility),
                                    *((f"index {i.name}", i.volatility_model, i.volatility) for i in self.indices)):
            if model == "heston" and (typed_vol is not None or md.equity_vols is None):
                raise ValueError(
                    f"{label}: volatility_model = \"heston\" is fitted to the smile in market_data.equity_vols; "
                    "give that file and no typed-in volatility"
                )
        for idx in self.indices:
            if idx.level is None and md.equity_index is None:
                raise ValueError(
                    f"index {idx.name}: give level and income_yield, or market_data.equity_index with a row for it"
                )
            if idx.volatility is None and md.equity_vols is None:
                raise ValueError(
                    f"index {idx.name}: give volatility, or market_data.equity_vols with its implied volatilities"
                )
        return self

    @model_validator(mode="after")
    def _sensitivity_names(self) -> RunConfig:
        names = [s.name for s in self.sensitivities]
        if len(set(n.lower() for n in names)) != len(names):
            raise ValueError(f"sensitivity names must not repeat (case ignored): {names}")
        return self

    @model_validator(mode="after")
    def _curve_covers(self) -> RunConfig:
        longest = max([*self.outputs.bond_maturities, *(self.inflation.real_bond_maturities if self.inflation else [])])
        need = self.simulation.max_horizon_years + longest
        if self.curve is not None:
            have, key = self.curve.maturities[-1], "curve.maturities ends at"
        else:
            if self.curve_extrapolation is None:
                raise ValueError("give the curve: [curve] pillars, or market_data.curve with [curve_extrapolation]")
            have, key = self.curve_extrapolation.long_end_years, "curve_extrapolation.long_end_years is"
        if need > have + 1e-9:
            raise ValueError(
                f"simulation.horizon_years ({self.simulation.max_horizon_years:g}) plus the longest "
                f"bond maturity ({longest:g}, outputs or inflation.real_bond_maturities) needs the curve "
                f"to {need:g} years, but {key} {have:g}"
            )
        ty = self.real_world.target_year
        if ty is not None and ty > have:
            raise ValueError(f"real_world.target_year {ty:g} lies beyond the curve ({have:g} years)")
        return self
