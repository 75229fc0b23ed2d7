"""Total-return indices (equities, property) as a Gaussian part of the economy model.

Under the market-consistent measure each index follows

    d ln S = (r - sigma_S(t)^2 / 2) dt + sigma_S(t) dZ_S,

with its own driver ``Z_S`` (named after the index) and a piecewise-constant volatility. Over a
step its log moves by the rates' integral ``I`` (the short rate's time integral, through the
rate factors) plus its own noise:

    L_1 = L_0 + sum_f B_f(D) f_0 + int phi - int sigma_S^2 / 2 + e_I + e_S,   e_S = int sigma_S dZ_S

(Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 3.3; the
rates part gives ``B_f``, ``int phi`` and the loadings of ``e_I``). Under the real-world measure
the driver gains the price of risk ``risk premium / sigma_S(t)``: the index then earns its risk
premium over cash.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from pqflow.models.kernels import Exposure, grid_pieces
from pqflow.models.schedule import PiecewiseConstant, as_schedule
from pqflow.storage.names import INDEX_KINDS, index_column

if TYPE_CHECKING:  # economy imports this module
    from pqflow.models.economy import RatesStep

__all__ = ["TotalReturnIndex"]

_NAME = re.compile(r"^[a-z][a-z0-9_]*$")


@dataclass(frozen=True, kw_only=True)
class TotalReturnIndex:
    """A total-return index (income reinvested), the one parameter type of every index of a
    run, the core equity included: ``kind`` equity or property, ``level`` at time 0,
    ``income_yield`` (dividend or rental, continuous; used for options on the price index),
    ``volatility`` (a number or piecewise constant) and ``correlation`` with the rate
    driver(s): rho with the short-rate shock under Hull-White, the pair ``(rho_x, rho_y)`` with
    the factor shocks under G2++ (``None`` where not known; the option closed forms of
    :mod:`pqflow.models.equity` need it, the simulation takes it from the driver correlation).
    Its driver is named ``name``."""

    name: str
    kind: str
    level: float
    income_yield: float
    volatility: float | PiecewiseConstant
    correlation: float | tuple[float, float] | None = None

    def __post_init__(self) -> None:
        if not _NAME.match(self.name):
            raise ValueError(f"index name {self.name!r} must be lower-case letters, digits and _")
        if self.kind not in INDEX_KINDS:
            raise ValueError(f"index kind must be one of {INDEX_KINDS}, not {self.kind!r}")
        if not self.level > 0.0:
            raise ValueError(f"index {self.name}: level must be positive")
        if not all(v > 0.0 for v in self.vol_schedule.values):
            raise ValueError(f"index {self.name}: volatility must be positive")
        if self.correlation is not None:
            pair = self.correlation if isinstance(self.correlation, tuple) else (self.correlation,)
            if not all(-1.0 < c < 1.0 for c in pair):
                raise ValueError(f"index {self.name}: the index-rate correlation must lie strictly inside (-1, 1)")

    @property
    def rates_correlation(self) -> float | tuple[float, float]:
        """``correlation``, which the option closed forms need (error when not known)."""
        if self.correlation is None:
            raise ValueError(f"index {self.name}: its correlation with the rate driver(s) is not known")
        return self.correlation

    @property
    def vol_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.volatility)

    @property
    def column(self) -> str:
        return index_column(self.kind, self.name)

    # ------------------------------------------------------------- the GaussianPart protocol

    @property
    def drivers(self) -> tuple[str, ...]:
        return (self.name,)

    @property
    def state_names(self) -> tuple[str, ...]:
        return (f"log_{self.column}",)

    def initial_state(self) -> np.ndarray:
        return np.array([np.log(self.level)])

    def exposures(self, integral: tuple[Exposure, ...]) -> tuple[tuple[Exposure, ...], ...]:
        return ((*integral, Exposure(driver=self.name, kind="one", scale=self.vol_schedule)),)

    def step_rows(self, times: np.ndarray, rates: RatesStep, correlation) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        n_steps = times.size - 1
        pieces = grid_pieces(times, self.vol_schedule)
        half_var = pieces.per_step(0.5 * pieces.values(self.vol_schedule) ** 2 * pieces.length, n_steps)
        to_factors = rates.b_rows[:, None, :]
        own = np.ones((n_steps, 1, 1))
        drift = (rates.int_phi - half_var)[:, None]
        return to_factors, own, drift

    def known_columns(self) -> tuple[str, ...]:
        return (self.column,)

    def columns(self, times: np.ndarray, states: np.ndarray, wanted: tuple[str, ...]) -> dict[str, np.ndarray]:
        return {self.column: np.exp(states[:, :, 0])} if self.column in wanted else {}

    def column_units(self) -> dict[str, str]:
        income = "dividends" if self.kind == "equity" else "rental income"
        return {self.column: f"{self.kind} total-return index level ({income} reinvested)"}
