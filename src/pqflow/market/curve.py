"""Today's risk-free discount curve ``P(0, t)``.

Times are year fractions from the valuation date; rates are continuously compounded unless a
name says otherwise.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np
from scipy.interpolate import PchipInterpolator

__all__ = ["DiscountCurve", "LogDiscountCurve"]


@runtime_checkable
class DiscountCurve(Protocol):
    """What the models need of a curve: discount factors and instantaneous forwards."""

    @property
    def max_maturity(self) -> float:
        """Longest maturity the curve is defined for, in years."""
        ...

    def discount(self, t: np.ndarray | float) -> np.ndarray:
        """``P(0, t)`` for each ``t`` (any shape), ``P(0, 0) = 1``."""
        ...

    def forward(self, t: np.ndarray | float) -> np.ndarray:
        """Instantaneous forward rate ``f(0, t) = -d ln P(0, t) / dt``."""
        ...


@dataclass(frozen=True, kw_only=True)
class LogDiscountCurve:
    """Shape-preserving cubic (PCHIP) interpolation of ``-ln P(0, t)`` through the pillars.

    Interpolating the log discount factor (the integrated forward) with a monotone,
    continuously differentiable cubic keeps the forward curve continuous and free of the
    overshoot of a natural spline; between the pillars the curve reprices every input
    exactly. ``(0, 0)`` is always a node. No extrapolation: asking beyond the last pillar is an
    error, so a run never silently uses a curve the data do not support.

    maturities: pillar times in years, strictly increasing and positive, shape ``(n,)``.
    discount_factors: ``P(0, t_i)`` at the pillars, positive, shape ``(n,)``.
    """

    maturities: np.ndarray
    discount_factors: np.ndarray
    _interp: PchipInterpolator = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        t = np.asarray(self.maturities, dtype=float)
        p = np.asarray(self.discount_factors, dtype=float)
        if t.ndim != 1 or t.shape != p.shape or t.size == 0:
            raise ValueError("maturities and discount_factors must be 1-d arrays of one length")
        if not np.all(np.isfinite(t)) or not np.all(np.isfinite(p)):
            raise ValueError("curve pillars must be finite numbers")
        if t[0] <= 0.0 or np.any(np.diff(t) <= 0.0):
            raise ValueError("curve maturities must be positive and strictly increasing")
        if np.any(p <= 0.0):
            raise ValueError("discount factors must be positive")
        object.__setattr__(self, "maturities", t)
        object.__setattr__(self, "discount_factors", p)
        nodes = np.concatenate(([0.0], t))
        log_df = np.concatenate(([0.0], -np.log(p)))
        object.__setattr__(self, "_interp", PchipInterpolator(nodes, log_df, extrapolate=False))

    @classmethod
    def from_zero_rates(
        cls, maturities: np.ndarray, zero_rates: np.ndarray, *, compounding: str = "continuous"
    ) -> LogDiscountCurve:
        """Build from zero rates, ``continuous`` (``P = e^{-z t}``) or ``annual`` (``(1+z)^{-t}``)."""
        t = np.asarray(maturities, dtype=float)
        z = np.asarray(zero_rates, dtype=float)
        if compounding == "continuous":
            p = np.exp(-z * t)
        elif compounding == "annual":
            if np.any(z <= -1.0):
                raise ValueError("annually compounded zero rates must exceed -100%")
            p = (1.0 + z) ** (-t)
        else:
            raise ValueError(f"unknown compounding {compounding!r}: use 'continuous' or 'annual'")
        return cls(maturities=t, discount_factors=p)

    @property
    def max_maturity(self) -> float:
        return float(self.maturities[-1])

    def _check(self, t: np.ndarray) -> None:
        if np.any(t < 0.0) or np.any(t > self.max_maturity * (1.0 + 1e-12)):
            raise ValueError(
                f"curve asked at t in [{t.min():g}, {t.max():g}] but it is defined on "
                f"[0, {self.max_maturity:g}] years only"
            )

    def discount(self, t: np.ndarray | float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        self._check(t)
        return np.exp(-self._interp(np.minimum(t, self.max_maturity)))

    def forward(self, t: np.ndarray | float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        self._check(t)
        return self._interp(np.minimum(t, self.max_maturity), 1)

    def zero_rate(self, t: np.ndarray | float) -> np.ndarray:
        """Continuously compounded zero rate; at ``t = 0`` the short end ``f(0, 0)``."""
        t = np.asarray(t, dtype=float)
        self._check(t)
        safe = np.where(t > 0.0, t, 1.0)
        return np.where(t > 0.0, self._interp(np.minimum(t, self.max_maturity)) / safe, self.forward(0.0))
