"""European swaptions under G2++ and the fit of ``(a, sigma, b, eta, rho)`` to a swaption grid.

Swaption conventions are those of :mod:`pqflow.calibration.swaptions` (fixed leg
``T_1 < ... < T_n = T0 + tenor`` with accruals ``tau_i``, floating leg at par, at-the-money
strike the forward swap rate ``F = (P(0,T0) - P(0,Tn)) / A``). The price is Brigo and Mercurio's
one-dimensional integral (*Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 4.2,
eq. 4.31, from memory), :func:`pqflow.models.g2pp.swaption_price`.

Calibration: the same quote objects (:class:`pqflow.calibration.swaptions.SwaptionQuote`) and
the same objective as the Hull-White fit: weighted least squares of the implied-volatility
errors in the quoted convention (``r_i`` in basis points of volatility; the default) or of the
price errors (basis points of notional), by ``scipy.optimize.least_squares`` within bounds.

Identification. G2++ is symmetric under ``(a, sigma) <-> (b, eta)``; the fitted parameters are
reported with ``a >= b`` (the fast factor first). ATM swaption prices depend on the parameters
through the variances of swap rates only, and a small grid may leave directions of the five
parameters nearly flat (notably ``rho`` against the two volatilities when ``a`` and ``b`` are
close). The report therefore shows the repricing of every quote; any parameter can be held
fixed (``fixed={"rho": -0.7}``), a common practice when it is poorly identified.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Literal

import numpy as np
from scipy.optimize import least_squares

from pqflow.calibration.formulas import implied_vol
from pqflow.calibration.swaptions import (
    SwaptionFitReport,
    SwaptionFitRow,
    SwaptionQuote,
    fixed_leg_schedule,
    forward_swap_rate,
    swap_annuity,
    swaption_quote_price,
)
from pqflow.errors import MarketDataError
from pqflow.market.curve import DiscountCurve
from pqflow.models.g2pp import G2PlusPlusParams, swaption_price

__all__ = [
    "G2_PARAMETER_NAMES",
    "G2SwaptionFitReport",
    "g2pp_swaption_price",
    "calibrate_g2pp_to_swaptions",
]

G2_PARAMETER_NAMES: tuple[str, ...] = ("a", "sigma", "b", "eta", "rho")
_BP = 1e-4
_DEFAULT_START = G2PlusPlusParams(a=0.5, sigma=0.01, b=0.05, eta=0.008, rho=-0.5)


#: The G2++ fit reports exactly what the Hull-White fit reports (``params`` holds
#: :class:`G2PlusPlusParams`, with ``a >= b``; ``fitted`` omits parameters held fixed).
G2SwaptionFitReport = SwaptionFitReport


def g2pp_swaption_price(
    curve: DiscountCurve,
    params: G2PlusPlusParams,
    *,
    expiry: float,
    tenor: float,
    strike: float | None = None,
    kind: Literal["payer", "receiver"] = "payer",
    frequency: int = 1,
) -> float:
    """Price per unit notional of a European swaption under G2++; ``strike=None`` means at the
    money (the forward swap rate)."""
    times, accruals = fixed_leg_schedule(expiry, tenor, frequency=frequency)
    k = forward_swap_rate(curve, expiry, tenor, frequency=frequency) if strike is None else strike
    return swaption_price(
        curve, params, expiry=expiry, payment_times=times, accruals=accruals, strike=float(k),
        kind=kind,
    )


def _to_quote_units(quote: SwaptionQuote, vol_decimal: float) -> float:
    return vol_decimal / _BP if quote.convention == "normal" else vol_decimal


def _canonical(params: G2PlusPlusParams) -> G2PlusPlusParams:
    return params if params.a >= params.b else params.swapped()


def calibrate_g2pp_to_swaptions(
    curve: DiscountCurve,
    quotes: Sequence[SwaptionQuote],
    *,
    objective: Literal["implied_vol", "price"] = "implied_vol",
    initial: G2PlusPlusParams | None = None,
    mean_reversion_bounds: tuple[float, float] = (1e-4, 3.0),
    volatility_bounds: tuple[float, float] = (1e-5, 0.2),
    correlation_bounds: tuple[float, float] = (-0.999, 0.999),
    fixed: Mapping[str, float] | None = None,
    frequency: int = 1,
    tolerance: float = 1e-12,
    max_evaluations: int = 1000,
) -> G2SwaptionFitReport:
    """Fit G2++ ``(a, sigma, b, eta, rho)`` to ATM swaption quotes by weighted least squares.

    quotes: any expiry x tenor grid, each in its own convention. objective: as in
    :func:`pqflow.calibration.swaptions.calibrate_hull_white_to_swaptions`. initial: starting
    point (default ``a = 0.5, sigma = 0.01, b = 0.05, eta = 0.008, rho = -0.5``, clipped into the
    bounds); the problem is not convex, so a start near the expected answer (last quarter's
    parameters) helps. fixed: parameters held at given values, by name (``"a"``, ``"sigma"``,
    ``"b"``, ``"eta"``, ``"rho"``). tolerance: ``ftol = xtol = gtol`` of ``least_squares``.
    """
    quotes = tuple(quotes)
    if not quotes:
        raise MarketDataError("no swaption quotes to calibrate to")
    if objective not in ("implied_vol", "price"):
        raise ValueError(f"objective must be 'implied_vol' or 'price', not {objective!r}")
    weights = np.array([q.weight for q in quotes])
    if not np.sum(weights) > 0.0:
        raise MarketDataError("every swaption quote has weight 0: nothing to fit")
    for name, (lo, hi) in (("mean_reversion", mean_reversion_bounds), ("volatility", volatility_bounds)):
        if not 0.0 < lo < hi:
            raise ValueError(f"{name}_bounds must satisfy 0 < lower < upper")
    if not -1.0 < correlation_bounds[0] < correlation_bounds[1] < 1.0:
        raise ValueError("correlation_bounds must satisfy -1 < lower < upper < 1")
    fixed = dict(fixed or {})
    unknown = sorted(set(fixed) - set(G2_PARAMETER_NAMES))
    if unknown:
        raise ValueError(f"unknown G2++ parameters to fix: {unknown}; use {G2_PARAMETER_NAMES}")
    free = tuple(n for n in G2_PARAMETER_NAMES if n not in fixed)
    if not free:
        raise ValueError("every G2++ parameter is fixed: nothing to fit")

    last = max(q.expiry + q.tenor for q in quotes)
    if last > curve.max_maturity * (1.0 + 1e-12):
        raise MarketDataError(
            f"swaption quotes run to {last:g} years but the curve ends at {curve.max_maturity:g}"
        )
    forwards = np.array([forward_swap_rate(curve, q.expiry, q.tenor, frequency=frequency) for q in quotes])
    annuities = np.array([swap_annuity(curve, q.expiry, q.tenor, frequency=frequency) for q in quotes])
    market_prices = np.array([swaption_quote_price(curve, q, frequency=frequency) for q in quotes])
    market_vols = np.array([q.vol_decimal for q in quotes])
    sqrt_w = np.sqrt(weights)
    schedules = [fixed_leg_schedule(q.expiry, q.tenor, frequency=frequency) for q in quotes]

    bounds = {
        "a": mean_reversion_bounds, "b": mean_reversion_bounds,
        "sigma": volatility_bounds, "eta": volatility_bounds, "rho": correlation_bounds,
    }
    start = initial or _DEFAULT_START
    x0 = np.array([float(np.clip(getattr(start, n), *bounds[n])) for n in free])
    lower = np.array([bounds[n][0] for n in free])
    upper = np.array([bounds[n][1] for n in free])
    scale = np.array([abs(v) if n != "rho" else 1.0 for n, v in zip(free, x0, strict=True)])

    def unpack(theta: np.ndarray) -> G2PlusPlusParams:
        values = dict(fixed)
        values.update({n: float(v) for n, v in zip(free, theta, strict=True)})
        return G2PlusPlusParams(**values)

    def model_prices(params: G2PlusPlusParams) -> np.ndarray:
        return np.array([
            swaption_price(curve, params, expiry=q.expiry, payment_times=t, accruals=tau,
                           strike=float(f), kind="payer")
            for q, (t, tau), f in zip(quotes, schedules, forwards, strict=True)
        ])

    def model_vols(prices: np.ndarray) -> np.ndarray:
        return np.array([
            float(implied_vol(q.convention, p, f, f, q.expiry, annuity=a, kind="payer", shift=q.shift))
            for q, p, f, a in zip(quotes, prices, forwards, annuities, strict=True)
        ])

    def residuals(theta: np.ndarray) -> np.ndarray:
        prices = model_prices(unpack(theta))
        if objective == "price":
            return sqrt_w * (prices - market_prices) / _BP
        return sqrt_w * (model_vols(prices) - market_vols) / _BP

    result = least_squares(
        residuals, x0, bounds=(lower, upper), method="trf", x_scale=scale,
        ftol=tolerance, xtol=tolerance, gtol=tolerance, max_nfev=max_evaluations,
    )
    params = unpack(result.x)
    prices = model_prices(params)
    vols = model_vols(prices)
    diff_bp = (vols - market_vols) / _BP
    rows = tuple(
        SwaptionFitRow(
            expiry=q.expiry, tenor=q.tenor, convention=q.convention, shift=q.shift,
            forward_rate=float(f), annuity=float(a), market_vol=q.vol,
            model_vol=_to_quote_units(q, float(v)), vol_difference_bp=float(d),
            market_price=float(mp), model_price=float(p), weight=q.weight,
        )
        for q, f, a, v, d, mp, p in zip(quotes, forwards, annuities, vols, diff_bp, market_prices, prices, strict=True)
    )
    at_bound = {n for n, m in zip(free, result.active_mask, strict=True) if m != 0}
    canonical = _canonical(params)
    if canonical is not params:  # relabel the factors in the names too
        relabel = {"a": "b", "b": "a", "sigma": "eta", "eta": "sigma", "rho": "rho"}
        free = tuple(sorted((relabel[n] for n in free), key=G2_PARAMETER_NAMES.index))
        at_bound = {relabel[n] for n in at_bound}
    return G2SwaptionFitReport(
        params=canonical,
        rows=rows,
        rmse_bp=float(np.sqrt(np.mean(diff_bp**2))),
        price_rmse_bp=float(np.sqrt(np.mean(((prices - market_prices) / _BP) ** 2))),
        objective=objective,
        fitted=free,
        at_bound=tuple(n for n in G2_PARAMETER_NAMES if n in at_bound),
        success=bool(result.success),
        status=int(result.status),
        message=str(result.message),
        n_function_evaluations=int(result.nfev),
        n_jacobian_evaluations=int(result.njev) if result.njev is not None else 0,
    )
