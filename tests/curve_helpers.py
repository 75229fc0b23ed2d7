"""Curve helpers the tests use as references (no production path uses them): discount factors
bootstrapped from par swap rates with an annual fixed leg, a repricing check, and Smith-Wilson
fitted to typed-in zero or par rates.

Par bootstrap.
A par swap of ``n`` years with fixed rate ``s_n`` paid annually is worth zero, i.e. the fixed leg
is a par bond:

    s_n sum_{k=1..n} P(k) + P(n) = 1    =>    P(n) = (1 - s_n sum_{k<n} P(k)) / (1 + s_n).

Bootstrapping solves this year by year, so it needs a par rate at every whole year up to the
longest input. Missing years are filled by **linear interpolation in the par rate** between the
neighbouring inputs (common practice for a swap curve quoted at 1, 2, 3, 5, 7, 10, ... years);
years before the first input take the first input's rate (flat). The filled rates are reported
so the caller can see what was assumed. Beyond the last input nothing is invented: extrapolate
with :mod:`pqflow.market.smith_wilson`, which also fits the quoted swaps directly without any
filling (its cash-flow-matrix form).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from pqflow.errors import MarketDataError
from pqflow.market.curve import DiscountCurve, LogDiscountCurve
from pqflow.market.smith_wilson import (
    SmithWilsonCurve,
    SmithWilsonReport,
    fit_smith_wilson,
    par_swap_instruments,
    zero_coupon_instruments,
)

__all__ = [
    "BootstrapResult",
    "bootstrap_par_swaps",
    "par_rates_from_curve",
    "max_par_repricing_error",
    "smith_wilson_from_zero_rates",
    "smith_wilson_from_par_rates",
]

_WHOLE_YEAR_TOL = 1e-9


@dataclass(frozen=True, kw_only=True)
class BootstrapResult:
    """Annual discount factors bootstrapped from par swap rates.

    maturities: the years ``1 .. N``, ``(N,)``.
    discount_factors: ``P(0, k)``, ``(N,)``.
    par_rates: the par rate used at each year (input or filled, after any credit-risk
        adjustment), ``(N,)``.
    filled: ``True`` where the par rate was interpolated rather than quoted, ``(N,)``.
    credit_risk_adjustment_bp: deducted from the quoted rates before bootstrapping.
    """

    maturities: np.ndarray
    discount_factors: np.ndarray
    par_rates: np.ndarray
    filled: np.ndarray
    credit_risk_adjustment_bp: float = 0.0

    def curve(self) -> LogDiscountCurve:
        """The discount factors as a :class:`LogDiscountCurve` (no extrapolation past ``N``)."""
        return LogDiscountCurve(maturities=self.maturities, discount_factors=self.discount_factors)

    def annual_zero_rates(self) -> np.ndarray:
        """Annually compounded zero rates ``P(k)^{-1/k} - 1``, ``(N,)``."""
        return self.discount_factors ** (-1.0 / self.maturities) - 1.0


def _whole_years(maturities: np.ndarray, par_rates: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(maturities, dtype=float)
    s = np.asarray(par_rates, dtype=float)
    if t.ndim != 1 or t.shape != s.shape or t.size == 0:
        raise MarketDataError(
            "par swap rates: maturities and rates must be 1-d arrays of one length"
        )
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(s))):
        raise MarketDataError("par swap rates: maturities and rates must be finite numbers")
    years = np.rint(t)
    off = (np.abs(t - years) > _WHOLE_YEAR_TOL) | (years < 1)
    if np.any(off):
        i = int(np.argmax(off))
        raise MarketDataError(
            f"par swap rates: an annual fixed leg needs whole-year maturities of at least 1 year; "
            f"position {i + 1} has maturity {t[i]:g}"
        )
    if np.any(np.diff(years) <= 0):
        i = int(np.argmax(np.diff(years) <= 0)) + 1
        raise MarketDataError(
            f"par swap rates: maturities must be strictly increasing (position {i + 1}, "
            f"maturity {t[i]:g})"
        )
    return years.astype(int), s


def bootstrap_par_swaps(
    maturities: np.ndarray, par_rates: np.ndarray, *, credit_risk_adjustment_bp: float = 0.0
) -> BootstrapResult:
    """Bootstrap annual discount factors from par swap rates (annual fixed leg).

    maturities: whole years, strictly increasing, ``(n,)``; par_rates: decimals, ``(n,)``.
    credit_risk_adjustment_bp: deducted from every par rate first.
    Missing whole years are filled linearly in the par rate (flat before the first quote).
    """
    years, s = _whole_years(maturities, par_rates)
    s = s - credit_risk_adjustment_bp * 1e-4
    grid = np.arange(1, years[-1] + 1)
    filled_rates = np.interp(grid, years, s)  # flat to the left of the first quote
    filled = ~np.isin(grid, years)
    p = np.empty(grid.size)
    annuity = 0.0
    for k, rate in enumerate(filled_rates):
        p[k] = (1.0 - rate * annuity) / (1.0 + rate) if rate > -1.0 else -1.0
        if not (p[k] > 0.0 and np.isfinite(p[k])):
            raise MarketDataError(
                f"par swap rates imply a non-positive discount factor at {grid[k]} years "
                f"(par rate {rate:.6g}); check the quotes"
            )
        annuity += p[k]
    return BootstrapResult(
        maturities=grid.astype(float),
        discount_factors=p,
        par_rates=filled_rates,
        filled=filled,
        credit_risk_adjustment_bp=float(credit_risk_adjustment_bp),
    )


def par_rates_from_curve(curve: DiscountCurve, maturities: np.ndarray) -> np.ndarray:
    """Par rates ``(1 - P(n)) / sum_{k=1..n} P(k)`` of annual-fixed-leg swaps, ``(n,)``."""
    years = np.rint(np.asarray(maturities, dtype=float)).astype(int)
    if years.ndim != 1 or np.any(years < 1):
        raise ValueError("par swap maturities must be a 1-d array of whole years >= 1")
    p = np.asarray(curve.discount(np.arange(1, years.max() + 1, dtype=float)))
    annuity = np.cumsum(p)
    return (1.0 - p[years - 1]) / annuity[years - 1]


def max_par_repricing_error(
    curve: DiscountCurve,
    maturities: np.ndarray,
    par_rates: np.ndarray,
    *,
    credit_risk_adjustment_bp: float = 0.0,
) -> float:
    """``max_i |par_rate_model(n_i) - (par_rate_i - CRA)|`` in rate units (decimal).

    Pass the same ``credit_risk_adjustment_bp`` the curve was built with.
    """
    years, s = _whole_years(maturities, par_rates)
    target = s - credit_risk_adjustment_bp * 1e-4
    return float(np.max(np.abs(par_rates_from_curve(curve, years) - target)))


def smith_wilson_from_zero_rates(
    maturities: np.ndarray,
    zero_rates: np.ndarray,
    *,
    ufr: float,
    credit_risk_adjustment_bp: float = 0.0,
    **options: Any,
) -> tuple[SmithWilsonCurve, SmithWilsonReport]:
    """:func:`~pqflow.market.smith_wilson.fit_smith_wilson` on annually compounded zero rates
    ``(n,)`` at maturities ``(n,)``; ``options`` are passed on to it.
    """
    inst = zero_coupon_instruments(
        maturities, zero_rates, credit_risk_adjustment_bp=credit_risk_adjustment_bp
    )
    return fit_smith_wilson(inst, ufr=ufr, **options)


def smith_wilson_from_par_rates(
    maturities: np.ndarray,
    par_rates: np.ndarray,
    *,
    ufr: float,
    credit_risk_adjustment_bp: float = 0.0,
    **options: Any,
) -> tuple[SmithWilsonCurve, SmithWilsonReport]:
    """:func:`~pqflow.market.smith_wilson.fit_smith_wilson` on annual-fixed-leg par swap rates
    ``(n,)``, whole-year maturities; ``options`` are passed on to it.
    """
    inst = par_swap_instruments(
        maturities, par_rates, credit_risk_adjustment_bp=credit_risk_adjustment_bp
    )
    return fit_smith_wilson(inst, ufr=ufr, **options)
