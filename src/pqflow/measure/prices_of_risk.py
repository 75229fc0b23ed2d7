"""Market prices of risk: the drift change between the market-consistent measure Q and the
real-world measure P.

With ``W^Q_t = W^P_t + int_0^t lambda ds`` (Girsanov), each driver's drift under P is its drift
under Q plus its volatility times its price of risk. Prices of risk here are constant in time,
which keeps both measures Gaussian and the density on the grid exact and closed form.

For Hull-White, ``dx = (-a x + sigma lambda_r) dt + sigma dW^P``, so

    E_P[r_t] = alpha(t) + sigma lambda_r B(t),    E_Q[r_t] = alpha(t).

For the equity total-return index, ``lambda_S = ERP / sigma_S`` makes the expected excess return
over cash equal the equity risk premium.

G2++ rates (:mod:`pqflow.models.g2pp`: ``r = x + y + phi(t)``, ``dx = -a x dt + sigma dW1``,
``dy = -b y dt + eta dW2``, ``dW1 dW2 = rho dt``). Convention: the one rates price of risk
``lambda(t)`` is the price of the short-rate shock ``dW_r = (sigma dW1 + eta dW2) / s_r``,
``s_r = sqrt(sigma^2 + eta^2 + 2 rho sigma eta)``, with the shock orthogonal to it unpriced.
Girsanov with correlated drivers then shifts ``W1``, ``W2`` by ``lambda_x = w_x lambda``,
``lambda_y = w_y lambda``, ``w = R c / s_r`` (``c = (sigma, eta)``, ``R`` the factor
correlation: ``w_x = (sigma + rho eta) / s_r``, ``w_y = (rho sigma + eta) / s_r``;
:func:`g2_driver_weights`). The drift of ``r`` moves by ``s_r lambda`` (as ``sigma lambda``
under Hull-White) and the relative entropy rate is ``lambda^2 / 2``, the least of any split of
the price of risk between the factors that moves the short rate as much: putting the same
``lambda`` on both drivers instead would cost ``2 / (1 + rho)`` times as much entropy (6.7 at
``rho = -0.7``) and collapse the density weights' effective sample size. Each factor is a
shifted Ornstein-Uhlenbeck process, so

    E_P[x_t] = sigma w_x int_0^t lambda(s) e^{-a (t-s)} ds,   E_P[y_t] = eta w_y int_0^t lambda(s) e^{-b (t-s)} ds,
    E_P[r_t] = phi(t) + E_P[x_t] + E_P[y_t],                  E_Q[r_t] = phi(t),

and a constant ``lambda`` gives ``E_P[r_t] = phi(t) + lambda (sigma w_x B_a(t) + eta w_y B_b(t))``. Every
function here takes either :class:`~pqflow.models.hull_white.HullWhiteParams` or
:class:`~pqflow.models.g2pp.G2PlusPlusParams`; with G2++ :func:`real_world_factor_mean`
returns the pair ``(E_P[x_t], E_P[y_t])`` (the Hull-White return, one array, is unchanged).
Nothing here asks which model it holds: the formulas are written over the factors of
:class:`~pqflow.models.rates.RatesModel` (rates ``k_f``, volatilities ``s_f``, price-of-risk
weights ``w_f``), of which Hull-White has one and G2++ two.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import b_factor
from pqflow.models.rates import RatesModel
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments

__all__ = [
    "PricesOfRisk",
    "rates_price_of_risk_for_target",
    "equity_price_of_risk",
    "expected_short_rate",
    "real_world_factor_mean",
    "factor_means",
    "g2_driver_weights",
]


@dataclass(frozen=True, kw_only=True)
class PricesOfRisk:
    """The rates market price of risk per square-root year, deterministic (a number, or
    piecewise constant in time), on the short-rate shock ``W`` (the house view sets it). Every
    other driver's price of risk (each total-return index's ``risk premium / sigma``,
    :func:`equity_price_of_risk`, the core equity's included) is held per driver beside it."""

    rates: float | PiecewiseConstant

    @property
    def rates_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.rates)


def rates_price_of_risk_for_target(
    curve: DiscountCurve,
    params: RatesModel,
    *,
    target_short_rate: float,
    target_time: float,
) -> float:
    """``lambda_r`` such that the real-world expected short rate at ``target_time`` equals
    ``target_short_rate``: ``(target - shift(T)) / sum_f s_f w_f B_f(T)``, which is
    ``(target - alpha(T)) / (sigma B(T))`` under Hull-White and
    ``(target - phi(T)) / (sigma w_x B_a(T) + eta w_y B_b(T))`` under G2++ (the price of the
    short-rate shock, :func:`g2_driver_weights`)."""
    if not target_time > 0.0:
        raise ValueError("target time must be positive")
    factors = params.factor_rates()
    if not all(s > 0.0 for _, s, _ in factors):
        raise ValueError(f"a rate target needs a positive {params.label} volatility")
    gap = target_short_rate - float(params.short_rate_shift(curve, target_time))
    terms = [
        s * w * float(b_factor(k, target_time))
        for (k, s, _), w in zip(factors, params.price_of_risk_weights(), strict=True)
    ]
    return gap / sum(terms[1:], start=terms[0])


def g2_driver_weights(params: G2PlusPlusParams) -> tuple[float, ...]:
    """``(w_x, w_y)``: the rates price of risk ``lambda`` shifts ``W1`` by ``w_x lambda`` and ``W2``
    by ``w_y lambda`` (module docstring: the price of the short-rate shock)."""
    return params.price_of_risk_weights()


def equity_price_of_risk(
    equity_risk_premium: float, volatility: float | PiecewiseConstant
) -> float | PiecewiseConstant:
    """``lambda_S = ERP / sigma_S`` (piece by piece for a piecewise-constant volatility), so that
    the expected excess return of a total-return index over cash is its risk premium."""
    sched = as_schedule(volatility)
    if not all(v > 0.0 for v in sched.values):
        raise ValueError("index volatility must be positive")
    if sched.is_constant:
        return equity_risk_premium / sched.values[0]
    return PiecewiseConstant(knots=sched.knots, values=tuple(equity_risk_premium / v for v in sched.values))


def _ou_mean(a: float, s: float, rates_price_of_risk: PiecewiseConstant, t: np.ndarray | float) -> np.ndarray:
    """``s int_0^t lambda(u) e^{-a (t - u)} du``, any shape of ``t``."""
    t_arr = np.atleast_1d(np.asarray(t, dtype=float))
    out = np.empty(t_arr.shape)
    for i, ti in np.ndenumerate(t_arr):
        total = 0.0
        if ti > 0.0:
            for u0, u1, (lam,) in segments(0.0, float(ti), rates_price_of_risk):
                total += lam * float(b_factor(a, ti - u0) - b_factor(a, ti - u1))
        out[i] = s * total
    return out.reshape(np.shape(t))


def real_world_factor_mean(
    params: RatesModel,
    rates_price_of_risk: PiecewiseConstant,
    t: np.ndarray | float,
) -> Any:
    """Real-world factor mean(s) from zero at time 0, each of the shape of ``t``:
    ``E_P[f_t] = s_f w_f int_0^t lambda_r(u) e^{-k_f (t - u)} du`` for each factor ``f``
    (:meth:`~pqflow.models.rates.RatesModel.price_of_risk_weights`). One array for a one-factor
    model (Hull-White), else the tuple over the factors (G2++: ``(E_P[x_t], E_P[y_t])``)."""
    means = tuple(
        _ou_mean(k, s * w, rates_price_of_risk, t)
        for (k, s, _), w in zip(params.factor_rates(), params.price_of_risk_weights(), strict=True)
    )
    return means[0] if len(means) == 1 else means


def factor_means(params: RatesModel, factor_mean: Any) -> tuple[np.ndarray, ...]:
    """``factor_mean`` in the form :func:`real_world_factor_mean` returns it (one array for a
    one-factor model, one per factor otherwise) as the tuple over the factors, checked."""
    n = len(params.factor_rates())
    if n == 1 and not isinstance(factor_mean, (tuple, list)):
        return (np.asarray(factor_mean, dtype=float),)
    if not isinstance(factor_mean, (tuple, list)) or len(factor_mean) != n:
        names = ", ".join(f"E {name}_t" for name in params.factor_names)
        form = "pair" if n == 2 else f"{n}-tuple"
        raise ValueError(
            f"under {params.label} the factor mean is the {form} ({names}), one array per factor, as "
            "real_world_factor_mean returns it (zeros for the market-consistent value), not one array"
        )
    return tuple(np.asarray(m, dtype=float) for m in factor_mean)


def expected_short_rate(
    curve: DiscountCurve,
    params: RatesModel,
    prices_of_risk: PricesOfRisk,
    t: np.ndarray | float,
    *,
    measure: str,
) -> np.ndarray:
    """Closed-form expected short rate at ``t`` under ``measure``: the shift ``alpha(t)``
    (Hull-White) or ``phi(t)`` (G2++) under Q, plus the real-world factor means under P."""
    base = params.short_rate_shift(curve, t)
    if measure == "market_consistent":
        return base
    if measure == "real_world":
        for mean in factor_means(params, real_world_factor_mean(params, prices_of_risk.rates_schedule, t)):
            base = base + mean
        return base
    raise ValueError(f"unknown measure {measure!r}")
