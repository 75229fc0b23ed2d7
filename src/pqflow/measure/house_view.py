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

The functions never ask which model they hold: they are written over the factors of
:class:`~pqflow.models.rates.RatesModel` (``factor_rates``: ``k_f``, ``s_f``;
``price_of_risk_weights``: ``w_f``; ``short_rate_shift``; ``log_bond_constant``: ``ln A``).
One factor (Hull-White) gives the closed form above; several (G2++) the monthly recursion,
which for two factors is the one written out above.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.measure.prices_of_risk import factor_means
from pqflow.models.hull_white import b_factor
from pqflow.models.rates import RatesModel
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


def _combination(
    curve: DiscountCurve, params: RatesModel, t: np.ndarray, path: np.ndarray, *, target: str,
    maturity: float | None
) -> tuple[tuple[float, ...], np.ndarray]:
    """``(c, h(t))`` with ``sum_f c_f E f_t = h(t)`` putting the target on ``path``: ``c = 1``,
    ``h = m - shift`` for the short rate; ``c_f = B_f(M)``, ``h = M m + ln A(t, M)`` for the zero
    yield (module docstring)."""
    factors = params.factor_rates()
    if target == "short_rate":
        return tuple(1.0 for _ in factors), path - params.short_rate_shift(curve, t)
    if target == "zero_yield":
        _need_maturity(maturity)
        if maturity is None:
            raise ValueError("a zero-yield target needs a positive maturity, got None")
        c = tuple(float(b_factor(k, maturity)) for k, _, _ in factors)
        return c, maturity * path + params.log_bond_constant(curve, t, maturity)
    raise ValueError(f"unknown target {target!r}: use 'short_rate' or 'zero_yield'")


def _need_maturity(maturity: float | None) -> None:
    if maturity is None or not maturity > 0.0:
        raise ValueError(f"a zero-yield target needs a positive maturity, got {maturity!r}")


def model_target_value(
    curve: DiscountCurve,
    params: RatesModel,
    t: np.ndarray,
    factor_mean: Any,
    *,
    target: str,
    maturity: float | None,
) -> np.ndarray:
    """The target quantity at ``t`` when the factors equal ``factor_mean`` (their means, by linearity).

    factor_mean: one array broadcasting with ``t`` for a one-factor model (Hull-White), else one
    per factor (G2++: ``(E x_t, E y_t)``), as :func:`~pqflow.measure.prices_of_risk.real_world_factor_mean`
    returns it."""
    t = np.asarray(t, dtype=float)
    means = factor_means(params, factor_mean)
    if target == "short_rate":
        value = params.short_rate_shift(curve, t)
        for mean in means:
            value = value + mean
        return value
    if target != "zero_yield":
        raise ValueError(f"unknown target {target!r}: use 'short_rate' or 'zero_yield'")
    _need_maturity(maturity)
    if maturity is None:
        raise ValueError("a zero-yield target needs a positive maturity, got None")
    loads = [float(b_factor(k, maturity)) * mean for (k, _, _), mean in zip(params.factor_rates(), means, strict=True)]
    return (-params.log_bond_constant(curve, t, maturity) + sum(loads[1:], start=loads[0])) / maturity


def today_value(curve: DiscountCurve, params: RatesModel, *, target: str, maturity: float | None) -> float:
    """``m0``: the target quantity today."""
    zero = np.array([0.0])
    mean = params.zero_factor_mean(zero)
    return float(model_target_value(curve, params, zero, mean, target=target, maturity=maturity)[0])


def factor_mean_for_target(
    curve: DiscountCurve, params: RatesModel, t: np.ndarray, path: np.ndarray, *, target: str,
    maturity: float | None
) -> np.ndarray:
    """``g(t)``: the real-world factor mean that puts the target's expectation on ``path``
    (a one-factor model only, such as Hull-White: with more factors the path fixes only a
    combination of their means, which :func:`rates_price_of_risk_for_path` solves for month by
    month)."""
    if len(params.factor_rates()) != 1:
        raise ValueError(
            f"under {params.label} a target path fixes only a combination of the factor means; use "
            "rates_price_of_risk_for_path"
        )
    c, h = _combination(curve, params, np.asarray(t, dtype=float), path, target=target, maturity=maturity)
    return h / c[0]


def _path_lambdas(
    curve: DiscountCurve, params: RatesModel, knots: np.ndarray, path: np.ndarray, *, target: str,
    maturity: float | None
) -> np.ndarray:
    """Monthly ``lambda_j`` from the joint recursion of the factor means (module docstring)."""
    c, h = _combination(curve, params, knots, path, target=target, maturity=maturity)
    dt = 1.0 / KNOTS_PER_YEAR
    factors = params.factor_rates()
    weights = params.price_of_risk_weights()
    decay = [float(np.exp(-k * dt)) for k, _, _ in factors]
    load = [s * w * float(b_factor(k, dt)) for (k, s, _), w in zip(factors, weights, strict=True)]
    terms = [cf * lf for cf, lf in zip(c, load, strict=True)]
    denominator = sum(terms[1:], start=terms[0])
    if not denominator > 0.0:
        raise ValueError(
            f"under these {params.label} parameters a price of the short-rate shock does not move the target "
            f"(loading {denominator:.3g}); choose the short rate as the target"
        )
    lam = np.empty(knots.size - 1)
    means = [0.0 for _ in factors]  # exactly: every factor starts at 0
    for j in range(lam.size):
        means = [d * m for d, m in zip(decay, means, strict=True)]
        gap = h[j + 1]
        for cf, m in zip(c, means, strict=True):
            gap = gap - cf * m
        lam[j] = gap / denominator
        means = [m + lf * lam[j] for m, lf in zip(means, load, strict=True)]
    return lam


def rates_price_of_risk_for_path(
    curve: DiscountCurve,
    params: RatesModel,
    *,
    long_run_level: float,
    speed: float,
    horizon: float,
    target: str = "short_rate",
    maturity: float | None = None,
) -> PiecewiseConstant:
    """Monthly piecewise-constant ``lambda_r`` meeting the target path at every month end to
    ``horizon`` (the last value holds beyond it). With several factors (G2++) the schedule is
    the price of the short-rate shock, split over their drivers by the model's weights.

    With one factor the path fixes the factor mean itself, ``g(t)``, and
    ``lambda_j = (g_{j+1} - e^{-k D} g_j) / (s B(D))`` in closed form; with several it fixes
    only a combination, solved month by month (:func:`_path_lambdas`)."""
    factors = params.factor_rates()
    if not all(s > 0.0 for _, s, _ in factors):
        raise ValueError(f"a real-world rate view needs a positive {params.label} volatility")
    n = int(np.ceil(horizon * KNOTS_PER_YEAR - 1e-9))
    knots = np.arange(n + 1, dtype=float) / KNOTS_PER_YEAR
    start = today_value(curve, params, target=target, maturity=maturity)
    path = target_path(start, long_run_level, speed, knots)
    if len(factors) != 1:
        lam = _path_lambdas(curve, params, knots, path, target=target, maturity=maturity)
        return PiecewiseConstant(knots=tuple(knots[:-1]), values=tuple(lam))
    (k, s, _), = factors
    g = factor_mean_for_target(curve, params, knots, path, target=target, maturity=maturity)
    g[0] = 0.0  # exactly: x_0 = 0 (the formula gives it up to rounding)
    dt = 1.0 / KNOTS_PER_YEAR
    decay = np.exp(-k * dt)
    lam = (g[1:] - decay * g[:-1]) / (s * float(b_factor(k, dt)))
    return PiecewiseConstant(knots=tuple(knots[:-1]), values=tuple(lam))
