"""Equity total-return index as a geometric Brownian motion under Hull-White rates.

    d ln S_t = (r_t - sigma_S^2 / 2) dt + sigma_S dZ^Q_t,    dZ dW = rho dt,

with ``W`` the Hull-White driver (``rho`` is the correlation of the equity and short-rate
shocks; equity against bond prices has the opposite sign). The index reinvests dividends; the
price index is ``S_t e^{-q t}``.

European options on the price index have a closed form (Black's formula on the forward
``S_0 e^{-q T} / P(0, T)`` with the total variance below; Brigo and Mercurio 2006, and the
model of QuantLib's ``AnalyticBSMHullWhiteEngine``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from pqflow.market.curve import DiscountCurve
from pqflow.models.hull_white import HullWhiteParams, integrated_variance, phi2
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments

__all__ = ["EquityParams", "black_on_forward", "equity_total_variance", "equity_option_price"]


@dataclass(frozen=True, kw_only=True)
class EquityParams:
    """One total-return index: ``level`` at time 0, ``dividend_yield`` q (continuous),
    ``volatility`` sigma_S (a number, or piecewise constant in time) and ``correlation`` rho
    with the short-rate shocks."""

    name: str
    level: float
    dividend_yield: float
    volatility: float | PiecewiseConstant
    correlation: float

    def __post_init__(self) -> None:
        if not self.level > 0.0:
            raise ValueError("equity level must be positive")
        if not all(v > 0.0 for v in self.vol_schedule.values):
            raise ValueError("equity volatility must be positive")
        if not -1.0 < self.correlation < 1.0:
            raise ValueError("equity-rate correlation must lie strictly inside (-1, 1)")

    @property
    def vol_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.volatility)


def equity_total_variance(rates: HullWhiteParams, equity: EquityParams, expiry: float) -> float:
    """Variance of ``ln(S_T / P(T, T))`` under the T-forward measure,

        int_0^T [sigma_S(u)^2 + 2 rho sigma_S(u) sigma B(T - u)] du + V(T),

    which for constant sigma_S is ``sigma_S^2 T + 2 rho sigma_S sigma (T - B(T)) / a + V(T)``
    (``int_u0^u1 B(T - u) du = phi2(T - u0) - phi2(T - u1)``)."""
    a, s, rho = rates.mean_reversion, rates.volatility, equity.correlation
    total = float(integrated_variance(rates, expiry))
    for u0, u1, (vol,) in segments(0.0, expiry, equity.vol_schedule):
        total += vol**2 * (u1 - u0)
        total += 2.0 * rho * vol * s * float(phi2(a, expiry - u0) - phi2(a, expiry - u1))
    return total


def equity_option_price(
    curve: DiscountCurve,
    rates: HullWhiteParams,
    equity: EquityParams,
    *,
    expiry: float,
    strike: float,
    kind: str = "call",
) -> float:
    """European option on the price index ``S_T e^{-q T}`` with the given strike."""
    if not expiry > 0.0 or not strike > 0.0:
        raise ValueError("expiry and strike must be positive")
    df = float(curve.discount(expiry))
    forward = equity.level * np.exp(-equity.dividend_yield * expiry) / df
    return black_on_forward(df, forward, strike, equity_total_variance(rates, equity, expiry), kind)


def black_on_forward(df: float, forward: float, strike: float, total_variance: float, kind: str) -> float:
    """Black's formula ``df [F N(d1) - K N(d2)]`` (call) or its put, from the total variance of
    ``ln F_T`` under the T-forward measure (Black 1976)."""
    sd = float(np.sqrt(total_variance))
    d1 = np.log(forward / strike) / sd + 0.5 * sd
    d2 = d1 - sd
    if kind == "call":
        return float(df * (forward * norm.cdf(d1) - strike * norm.cdf(d2)))
    if kind == "put":
        return float(df * (strike * norm.cdf(-d2) - forward * norm.cdf(-d1)))
    raise ValueError(f"kind must be 'call' or 'put', not {kind!r}")

