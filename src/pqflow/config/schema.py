"""The run configuration: one TOML file, validated before any simulation.

Every table forbids unknown keys, so a typing error in a key name stops the run instead of
being silently ignored. Cross-field rules (curve long enough for the horizon and the longest
bond, antithetic pairs that fit the batches) live in the model validators below.
"""

from __future__ import annotations

import datetime as dt
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

__all__ = [
    "RunSection",
    "CurveSection",
    "HullWhiteSection",
    "EquitySection",
    "RealWorldSection",
    "SimulationSection",
    "OutputsSection",
    "ValidationSection",
    "RunConfig",
]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True, strict=False)


class RunSection(_Section):
    """Identity of the run."""

    name: str = Field(min_length=1, max_length=80, pattern=r"^[A-Za-z0-9_.\-]+$")
    valuation_date: dt.date
    description: str = ""


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
        if any(b <= a for a, b in zip(self.maturities, self.maturities[1:])):
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


class EquitySection(_Section):
    """One equity total-return index."""

    name: str = Field(min_length=1, max_length=40, pattern=r"^[a-z][a-z0-9_]*$")
    level: float = Field(gt=0.0)
    dividend_yield: float = Field(ge=-0.2, le=0.5)
    volatility: float = Field(gt=0.0, le=2.0)
    correlation_with_rates: float = Field(ge=-1.0, le=1.0)

    @field_validator("correlation_with_rates")
    @classmethod
    def _strict(cls, v: float) -> float:
        if abs(v) >= 1.0:
            raise ValueError(
                "must lie strictly inside (-1, 1): with |rho| = 1 the equity and rate shocks are "
                "one shock and their prices of risk cannot be set apart"
            )
        return v


class RealWorldSection(_Section):
    """The house view that moves the real-world drifts.

    Rates: give either ``rates_market_price_of_risk`` directly, or ``target_short_rate`` (the
    real-world expected short rate reached at ``target_year``, by default the horizon), from
    which the price of risk is derived. Equity: ``equity_risk_premium`` over cash.
    ``rates_volatility`` / ``equity_volatility`` may be stated to confirm the real-world
    volatilities; if they differ from the market-consistent ones the two measures are not
    equivalent and the run stops rather than write meaningless density weights.
    """

    rates_market_price_of_risk: float | None = Field(default=None, ge=-5.0, le=5.0)
    target_short_rate: float | None = Field(default=None, ge=-0.2, le=0.5)
    target_year: float | None = Field(default=None, gt=0.0)
    equity_risk_premium: float = Field(ge=-0.2, le=0.3)
    rates_volatility: float | None = Field(default=None, gt=0.0)
    equity_volatility: float | None = Field(default=None, gt=0.0)

    @model_validator(mode="after")
    def _one_rate_view(self) -> RealWorldSection:
        given = (self.rates_market_price_of_risk is not None) + (self.target_short_rate is not None)
        if given != 1:
            raise ValueError(
                "give exactly one of rates_market_price_of_risk or target_short_rate"
            )
        if self.target_year is not None and self.target_short_rate is None:
            raise ValueError("target_year goes with target_short_rate")
        return self


class SimulationSection(_Section):
    """Size and randomness of both scenario sets."""

    scenarios: int = Field(gt=0, le=10_000_000)
    horizon_years: float = Field(gt=0.0, le=150.0)
    steps_per_year: int = Field(gt=0, le=365)
    seed: int = Field(ge=0, lt=2**63)
    batch_size: int = Field(gt=0, le=1_000_000)
    antithetic: bool

    @model_validator(mode="after")
    def _grid(self) -> SimulationSection:
        steps = self.horizon_years * self.steps_per_year
        if abs(steps - round(steps)) > 1e-9:
            raise ValueError(
                f"horizon_years x steps_per_year = {steps:g} is not a whole number of steps"
            )
        if self.antithetic and (self.scenarios % 2 or self.batch_size % 2):
            raise ValueError("with antithetic = true, scenarios and batch_size must be even")
        return self

    @property
    def n_steps(self) -> int:
        return int(round(self.horizon_years * self.steps_per_year))


class OutputsSection(_Section):
    """What the scenario files carry."""

    bond_maturities: list[float] = Field(min_length=1, max_length=60)

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


class RunConfig(_Section):
    """A whole run configuration."""

    run: RunSection
    curve: CurveSection
    hull_white: HullWhiteSection
    equity: EquitySection
    real_world: RealWorldSection
    simulation: SimulationSection
    outputs: OutputsSection
    validation: ValidationSection = ValidationSection()

    @model_validator(mode="after")
    def _curve_covers(self) -> RunConfig:
        need = self.simulation.horizon_years + max(self.outputs.bond_maturities)
        have = self.curve.maturities[-1]
        if need > have + 1e-9:
            raise ValueError(
                f"simulation.horizon_years ({self.simulation.horizon_years:g}) plus the longest "
                f"outputs.bond_maturities ({max(self.outputs.bond_maturities):g}) needs the curve "
                f"to {need:g} years, but curve.maturities ends at {have:g}"
            )
        ty = self.real_world.target_year
        if ty is not None and ty > have:
            raise ValueError(f"real_world.target_year {ty:g} lies beyond the curve ({have:g} years)")
        return self
