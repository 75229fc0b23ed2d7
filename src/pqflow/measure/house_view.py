"""Market prices of risk from the house view: a real-world expected path for the short rate or
a zero yield.

The target path moves from today's value ``m0`` towards the long-run level ``L`` at speed ``k``:
``m(t) = m0 + (L - m0)(1 - e^{-k t})``. Both targets are affine in the Hull-White factor, so the
path fixes the real-world mean of the factor, ``g(t) = E_P[x_t]``:

* short rate: ``r_t = x_t + alpha(t)``, so ``g(t) = m(t) - alpha(t)``;
* zero yield of maturity ``M``: ``y_t = (-ln A(t, M) + B(M) x_t) / M``, so
  ``g(t) = (M m(t) + ln A(t, M)) / B(M)``.

With a price of risk ``lambda_j`` constant on each month ``[t_j, t_{j+1}]``, the factor mean
obeys ``g_{j+1} = e^{-a D} g_j + sigma lambda_j B(D)`` exactly, so
``lambda_j = (g_{j+1} - e^{-a D} g_j) / (sigma B(D))`` meets the path at every month end.
"""

from __future__ import annotations

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models.hull_white import HullWhiteParams, alpha, b_factor, integrated_variance
from pqflow.models.schedule import PiecewiseConstant

__all__ = ["target_path", "factor_mean_for_target", "rates_price_of_risk_for_path", "model_target_value"]

KNOTS_PER_YEAR = 12


def target_path(start: float, long_run_level: float, speed: float, t: np.ndarray) -> np.ndarray:
    """``m(t) = m0 + (L - m0)(1 - e^{-k t})``."""
    return start + (long_run_level - start) * (-np.expm1(-speed * np.asarray(t, dtype=float)))


def _log_a(curve: DiscountCurve, params: HullWhiteParams, t: np.ndarray, m: float) -> np.ndarray:
    return (
        np.log(curve.discount(t + m))
        - np.log(curve.discount(t))
        + 0.5 * (integrated_variance(params, m) - integrated_variance(params, t + m) + integrated_variance(params, t))
    )


def model_target_value(
    curve: DiscountCurve, params: HullWhiteParams, t: np.ndarray, factor_mean: np.ndarray, *, target: str, maturity: float | None
) -> np.ndarray:
    """The target quantity at ``t`` when the factor equals ``factor_mean`` (its mean, by linearity)."""
    t = np.asarray(t, dtype=float)
    if target == "short_rate":
        return factor_mean + alpha(curve, params, t)
    assert maturity is not None
    return (-_log_a(curve, params, t, maturity) + b_factor(params.mean_reversion, maturity) * factor_mean) / maturity


def today_value(curve: DiscountCurve, params: HullWhiteParams, *, target: str, maturity: float | None) -> float:
    """``m0``: the target quantity today."""
    return float(model_target_value(curve, params, np.array([0.0]), np.array([0.0]), target=target, maturity=maturity)[0])


def factor_mean_for_target(
    curve: DiscountCurve, params: HullWhiteParams, t: np.ndarray, path: np.ndarray, *, target: str, maturity: float | None
) -> np.ndarray:
    """``g(t)``: the real-world factor mean that puts the target's expectation on ``path``."""
    t = np.asarray(t, dtype=float)
    if target == "short_rate":
        return path - alpha(curve, params, t)
    if target == "zero_yield":
        assert maturity is not None
        return (maturity * path + _log_a(curve, params, t, maturity)) / b_factor(params.mean_reversion, maturity)
    raise ValueError(f"unknown target {target!r}: use 'short_rate' or 'zero_yield'")


def rates_price_of_risk_for_path(
    curve: DiscountCurve,
    params: HullWhiteParams,
    *,
    long_run_level: float,
    speed: float,
    horizon: float,
    target: str = "short_rate",
    maturity: float | None = None,
) -> PiecewiseConstant:
    """Monthly piecewise-constant ``lambda_r`` meeting the target path at every month end to
    ``horizon`` (the last value holds beyond it)."""
    if not params.volatility > 0.0:
        raise ValueError("a real-world rate view needs a positive Hull-White volatility")
    n = int(np.ceil(horizon * KNOTS_PER_YEAR - 1e-9))
    knots = np.arange(n + 1, dtype=float) / KNOTS_PER_YEAR
    start = today_value(curve, params, target=target, maturity=maturity)
    g = factor_mean_for_target(
        curve, params, knots, target_path(start, long_run_level, speed, knots), target=target, maturity=maturity
    )
    g[0] = 0.0  # exactly: x_0 = 0 (the formula gives it up to rounding)
    dt = 1.0 / KNOTS_PER_YEAR
    decay = np.exp(-params.mean_reversion * dt)
    lam = (g[1:] - decay * g[:-1]) / (params.volatility * float(b_factor(params.mean_reversion, dt)))
    return PiecewiseConstant(knots=tuple(knots[:-1]), values=tuple(lam))
