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

G2++ rates (:mod:`pqflow.models.g2pp`; ``r = x + y + phi(t)``). Convention: the one rates price
of risk ``lambda(t)`` prices the short-rate shock, shifting ``W1`` by ``w_x lambda`` and ``W2``
by ``w_y lambda`` (:func:`pqflow.measure.prices_of_risk.g2_driver_weights`), so

    E_P[x_t + y_t] = int_0^t lambda(s) [sigma w_x e^{-a (t-s)} + eta w_y e^{-b (t-s)}] ds.

Both targets are affine in ``(x, y)``: the short rate is ``x + y + phi(t)`` and the zero yield
``y_t(M) = (-ln A(t, M) + B_a(M) x_t + B_b(M) y_t) / M`` (``A`` from
:func:`pqflow.models.g2pp.zcb_price` at zero factors). The path therefore fixes one linear
combination ``c_x E_P[x_t] + c_y E_P[y_t] = h(t)``: ``c = (1, 1)``, ``h = m - phi`` for the short
rate; ``c = (B_a(M), B_b(M))``, ``h = M m + ln A(t, M)`` for the zero yield. The two means follow
their own exact monthly recursions, both linear in ``lambda_j``,

    E x_{j+1} = e^{-a D} E x_j + sigma w_x lambda_j B_a(D),   E y_{j+1} = e^{-b D} E y_j + eta w_y lambda_j B_b(D),

so each month ``lambda_j = (h_{j+1} - c_x e^{-aD} E x_j - c_y e^{-bD} E y_j) /
(c_x sigma w_x B_a(D) + c_y eta w_y B_b(D))`` (a positive denominator) meets the path at the month end,
and the means are carried forward. Under G2++ the factor mean passed to
:func:`model_target_value` is the pair ``(E_P[x_t], E_P[y_t])``, as
:func:`pqflow.measure.prices_of_risk.real_world_factor_mean` returns it (zeros for the
market-consistent value); under Hull-White it stays one array.
"""

from __future__ import annotations

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.measure.prices_of_risk import g2_driver_weights
from pqflow.models import g2pp
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams, alpha, b_factor, integrated_variance
from pqflow.models.schedule import PiecewiseConstant

__all__ = [
    "target_path",
    "factor_mean_for_target",
    "rates_price_of_risk_for_path",
    "model_target_value",
    "today_value",
]

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


def _g2_log_a(curve: DiscountCurve, params: G2PlusPlusParams, t: np.ndarray, m: float) -> np.ndarray:
    """``ln A(t, M)`` of G2++: ``ln P(t, t + M)`` at ``x = y = 0``."""
    return np.log(g2pp.zcb_price(curve, params, t, m, 0.0, 0.0))


def _g2_combination(
    curve: DiscountCurve, params: G2PlusPlusParams, t: np.ndarray, path: np.ndarray, *, target: str,
    maturity: float | None
) -> tuple[float, float, np.ndarray]:
    """``(c_x, c_y, h(t))`` with ``c_x E x_t + c_y E y_t = h(t)`` putting the target on ``path``."""
    if target == "short_rate":
        return 1.0, 1.0, path - g2pp.phi(curve, params, t)
    if target == "zero_yield":
        _need_maturity(maturity)
        if maturity is None:
            raise ValueError("a zero-yield target needs a positive maturity, got None")
        c_x = float(b_factor(params.a, maturity))
        c_y = float(b_factor(params.b, maturity))
        return c_x, c_y, maturity * path + _g2_log_a(curve, params, t, maturity)
    raise ValueError(f"unknown target {target!r}: use 'short_rate' or 'zero_yield'")


def _need_maturity(maturity: float | None) -> None:
    if maturity is None or not maturity > 0.0:
        raise ValueError(f"a zero-yield target needs a positive maturity, got {maturity!r}")


def _g2_pair(factor_mean: object) -> tuple[np.ndarray, np.ndarray]:
    if not isinstance(factor_mean, (tuple, list)) or len(factor_mean) != 2:
        raise ValueError(
            "under G2++ the factor mean is the pair (E x_t, E y_t), as real_world_factor_mean "
            "returns it (zeros for the market-consistent value), not one array"
        )
    return np.asarray(factor_mean[0], dtype=float), np.asarray(factor_mean[1], dtype=float)


def model_target_value(
    curve: DiscountCurve,
    params: HullWhiteParams | G2PlusPlusParams,
    t: np.ndarray,
    factor_mean: np.ndarray | tuple[np.ndarray, np.ndarray],
    *,
    target: str,
    maturity: float | None,
) -> np.ndarray:
    """The target quantity at ``t`` when the factor equals ``factor_mean`` (its mean, by linearity).

    factor_mean: one array broadcasting with ``t`` (Hull-White), or the pair ``(E x_t, E y_t)``
    (G2++)."""
    t = np.asarray(t, dtype=float)
    if isinstance(params, G2PlusPlusParams):
        mx, my = _g2_pair(factor_mean)
        if target == "short_rate":
            return g2pp.phi(curve, params, t) + mx + my
        if target != "zero_yield":
            raise ValueError(f"unknown target {target!r}: use 'short_rate' or 'zero_yield'")
        _need_maturity(maturity)
        if maturity is None:
            raise ValueError("a zero-yield target needs a positive maturity, got None")
        loadings = float(b_factor(params.a, maturity)) * mx + float(b_factor(params.b, maturity)) * my
        return (-_g2_log_a(curve, params, t, maturity) + loadings) / maturity
    if target == "short_rate":
        return factor_mean + alpha(curve, params, t)
    if maturity is None:
        raise ValueError("a zero-yield target needs a positive maturity, got None")
    return (-_log_a(curve, params, t, maturity) + b_factor(params.mean_reversion, maturity) * factor_mean) / maturity


def today_value(
    curve: DiscountCurve, params: HullWhiteParams | G2PlusPlusParams, *, target: str, maturity: float | None
) -> float:
    """``m0``: the target quantity today."""
    zero = np.array([0.0])
    mean = (zero, zero) if isinstance(params, G2PlusPlusParams) else zero
    return float(model_target_value(curve, params, zero, mean, target=target, maturity=maturity)[0])


def factor_mean_for_target(
    curve: DiscountCurve, params: HullWhiteParams, t: np.ndarray, path: np.ndarray, *, target: str,
    maturity: float | None
) -> np.ndarray:
    """``g(t)``: the real-world factor mean that puts the target's expectation on ``path``
    (Hull-White only: under G2++ the path fixes only a combination of the two factor means,
    which :func:`rates_price_of_risk_for_path` solves for month by month)."""
    if isinstance(params, G2PlusPlusParams):
        raise ValueError(
            "under G2++ a target path fixes only a combination of the two factor means; use "
            "rates_price_of_risk_for_path"
        )
    t = np.asarray(t, dtype=float)
    if target == "short_rate":
        return path - alpha(curve, params, t)
    if target == "zero_yield":
        if maturity is None:
            raise ValueError("a zero-yield target needs a positive maturity, got None")
        return (maturity * path + _log_a(curve, params, t, maturity)) / b_factor(params.mean_reversion, maturity)
    raise ValueError(f"unknown target {target!r}: use 'short_rate' or 'zero_yield'")


def _g2_path_lambdas(
    curve: DiscountCurve, params: G2PlusPlusParams, knots: np.ndarray, path: np.ndarray, *, target: str,
    maturity: float | None
) -> np.ndarray:
    """Monthly ``lambda_j`` from the joint recursion of ``(E x, E y)`` (module docstring)."""
    c_x, c_y, h = _g2_combination(curve, params, knots, path, target=target, maturity=maturity)
    dt = 1.0 / KNOTS_PER_YEAR
    w_x, w_y = g2_driver_weights(params)
    a, s, b, e = params.a, params.sigma * w_x, params.b, params.eta * w_y
    decay_x, decay_y = np.exp(-a * dt), np.exp(-b * dt)
    load_x, load_y = s * float(b_factor(a, dt)), e * float(b_factor(b, dt))
    denominator = c_x * load_x + c_y * load_y
    if not denominator > 0.0:
        raise ValueError(
            "under these G2++ parameters a price of the short-rate shock does not move the target "
            f"(loading {denominator:.3g}); choose the short rate as the target"
        )
    lam = np.empty(knots.size - 1)
    ex = ey = 0.0  # exactly: x_0 = y_0 = 0
    for j in range(lam.size):
        ex, ey = decay_x * ex, decay_y * ey
        lam[j] = (h[j + 1] - c_x * ex - c_y * ey) / denominator
        ex += load_x * lam[j]
        ey += load_y * lam[j]
    return lam


def rates_price_of_risk_for_path(
    curve: DiscountCurve,
    params: HullWhiteParams | G2PlusPlusParams,
    *,
    long_run_level: float,
    speed: float,
    horizon: float,
    target: str = "short_rate",
    maturity: float | None = None,
) -> PiecewiseConstant:
    """Monthly piecewise-constant ``lambda_r`` meeting the target path at every month end to
    ``horizon`` (the last value holds beyond it). Under G2++ the schedule is the price of risk
    of both factor drivers."""
    if not isinstance(params, G2PlusPlusParams) and not params.volatility > 0.0:
        raise ValueError("a real-world rate view needs a positive Hull-White volatility")
    n = int(np.ceil(horizon * KNOTS_PER_YEAR - 1e-9))
    knots = np.arange(n + 1, dtype=float) / KNOTS_PER_YEAR
    start = today_value(curve, params, target=target, maturity=maturity)
    path = target_path(start, long_run_level, speed, knots)
    if isinstance(params, G2PlusPlusParams):
        lam = _g2_path_lambdas(curve, params, knots, path, target=target, maturity=maturity)
        return PiecewiseConstant(knots=tuple(knots[:-1]), values=tuple(lam))
    g = factor_mean_for_target(curve, params, knots, path, target=target, maturity=maturity)
    g[0] = 0.0  # exactly: x_0 = 0 (the formula gives it up to rounding)
    dt = 1.0 / KNOTS_PER_YEAR
    decay = np.exp(-params.mean_reversion * dt)
    lam = (g[1:] - decay * g[:-1]) / (params.volatility * float(b_factor(params.mean_reversion, dt)))
    return PiecewiseConstant(knots=tuple(knots[:-1]), values=tuple(lam))
