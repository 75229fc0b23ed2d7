"""Market prices of risk: the drift change between the market-consistent measure Q and the
real-world measure P.

With ``W^Q_t = W^P_t + int_0^t lambda ds`` (Girsanov), each driver's drift under P is its drift
under Q plus its volatility times its price of risk. Prices of risk here are constant in time,
which keeps both measures Gaussian and the density on the grid exact and closed form.

For Hull-White, ``dx = (-a x + sigma lambda_r) dt + sigma dW^P``, so

    E_P[r_t] = alpha(t) + sigma lambda_r B(t),    E_Q[r_t] = alpha(t).

For the equity total-return index, ``lambda_S = ERP / sigma_S`` makes the expected excess return
over cash equal the equity risk premium.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models.hull_white import HullWhiteParams, alpha, b_factor
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments

__all__ = [
    "PricesOfRisk",
    "rates_price_of_risk_for_target",
    "equity_price_of_risk",
    "expected_short_rate",
    "real_world_factor_mean",
]


@dataclass(frozen=True, kw_only=True)
class PricesOfRisk:
    """Market prices of risk per square-root year, deterministic (a number, or piecewise
    constant in time), one per correlated driver: ``rates`` on the short-rate shock ``W``,
    ``equity`` on the equity shock ``Z``."""

    rates: float | PiecewiseConstant
    equity: float | PiecewiseConstant

    @property
    def rates_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.rates)

    @property
    def equity_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.equity)


def rates_price_of_risk_for_target(
    curve: DiscountCurve, params: HullWhiteParams, *, target_short_rate: float, target_time: float
) -> float:
    """``lambda_r`` such that the real-world expected short rate at ``target_time`` equals
    ``target_short_rate``: ``(target - alpha(T)) / (sigma B(T))``."""
    if not target_time > 0.0:
        raise ValueError("target time must be positive")
    if not params.volatility > 0.0:
        raise ValueError("a rate target needs a positive Hull-White volatility")
    gap = target_short_rate - float(alpha(curve, params, target_time))
    return gap / (params.volatility * float(b_factor(params.mean_reversion, target_time)))


def equity_price_of_risk(equity_risk_premium: float, volatility: float) -> float:
    """``lambda_S = ERP / sigma_S``."""
    if not volatility > 0.0:
        raise ValueError("equity volatility must be positive")
    return equity_risk_premium / volatility


def real_world_factor_mean(
    params: HullWhiteParams, rates_price_of_risk: PiecewiseConstant, t: np.ndarray | float
) -> np.ndarray:
    """``E_P[x_t] = sigma int_0^t lambda_r(s) e^{-a (t - s)} ds`` (``x_0 = 0``), any shape of ``t``."""
    a, s = params.mean_reversion, params.volatility
    t_arr = np.atleast_1d(np.asarray(t, dtype=float))
    out = np.empty(t_arr.shape)
    for i, ti in np.ndenumerate(t_arr):
        total = 0.0
        if ti > 0.0:
            for u0, u1, (lam,) in segments(0.0, float(ti), rates_price_of_risk):
                total += lam * float(b_factor(a, ti - u0) - b_factor(a, ti - u1))
        out[i] = s * total
    return out.reshape(np.shape(t))


def expected_short_rate(
    curve: DiscountCurve,
    params: HullWhiteParams,
    prices_of_risk: PricesOfRisk,
    t: np.ndarray | float,
    *,
    measure: str,
) -> np.ndarray:
    """Closed-form expected short rate at ``t`` under ``measure``."""
    base = alpha(curve, params, t)
    if measure == "market_consistent":
        return base
    if measure == "real_world":
        return base + real_world_factor_mean(params, prices_of_risk.rates_schedule, t)
    raise ValueError(f"unknown measure {measure!r}")
