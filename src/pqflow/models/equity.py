"""Equity total-return index as a geometric Brownian motion under Hull-White or G2++ rates.

    d ln S_t = (r_t - sigma_S(t)^2 / 2) dt + sigma_S(t) dZ^Q_t,    dZ dW = rho dt,

with ``W`` the Hull-White driver (``rho`` is the correlation of the equity and short-rate
shocks; equity against bond prices has the opposite sign), or under G2++ the correlations
``(rho_xS, rho_yS)`` with the factor shocks ``W1``, ``W2``. The index reinvests dividends; the
price index is ``S_t e^{-q t}``.

European options on the price index have a closed form: Black's formula on the forward
``S_0 e^{-q T} / P(0, T)`` with the index's forward variance (Brigo and Mercurio 2006, and the
model of QuantLib's ``AnalyticBSMHullWhiteEngine``). :func:`forward_variance` is the one place
that variance is computed (its derivation: :mod:`pqflow.calibration.equity_vol`).
"""

from __future__ import annotations

import numpy as np
from scipy.stats import norm

from pqflow.market.curve import DiscountCurve
from pqflow.models.hull_white import phi2
from pqflow.models.rates import RatesModel
from pqflow.models.schedule import PiecewiseConstant, as_schedule
from pqflow.models.total_return import TotalReturnIndex

__all__ = [
    "RateParams",
    "EquityRateCorrelation",
    "black_on_forward",
    "forward_variance",
    "schedule_buckets",
    "equity_total_variance",
    "equity_option_price",
    "checked_correlation",
    "rate_terms",
    "cross_variance",
    "rate_variance",
]


#: An index's correlation with the rate drivers: one number (with the short-rate shock) under
#: Hull-White, the pair ``(rho_xS, rho_yS)`` (with the factor shocks ``W1``, ``W2``) under G2++;
#: each rates model checks its own form (:meth:`pqflow.models.rates.RatesModel.equity_correlation`).
EquityRateCorrelation = float | tuple[float, float]
#: Kept for callers that name the type; any :class:`pqflow.models.rates.RatesModel` will do.
RateParams = RatesModel


def bucket_terms(
    ends: np.ndarray, a: float, expiry: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Per bucket, for each expiry: the length of its overlap with ``[0, T]`` and
    ``int_{lo}^{hi} B(T - u) du``; both shape ``expiry.shape + (n,)``."""
    t = expiry[..., None]
    starts = np.concatenate(([0.0], ends[:-1]))
    lo = np.minimum(starts, t)
    hi = np.minimum(ends, t)
    hi = np.concatenate((hi[..., :-1], np.broadcast_to(t, t.shape)), axis=-1)  # flat after last
    lo = np.minimum(lo, hi)
    length = hi - lo
    cross = phi2(a, t - lo) - phi2(a, t - hi)
    return length, cross


def checked_correlation(
    rates: RatesModel, correlation: EquityRateCorrelation, *, strict: bool
) -> EquityRateCorrelation:
    """The correlation in the form ``rates`` needs (one number under Hull-White, the pair
    ``(rho_xS, rho_yS)`` under G2++), checked by the model: with ``strict`` each must lie
    strictly inside (-1, 1) and the correlation matrix of the rate drivers and the index be
    positive definite, else inside [-1, 1] and positive semi-definite."""
    return rates.equity_correlation(correlation, strict=strict)


def rate_terms(
    rates: RatesModel,
    correlation: EquityRateCorrelation,
    ends: np.ndarray,
    expiry: np.ndarray,
) -> tuple[np.ndarray, list[tuple[float, np.ndarray]]]:
    """Per bucket, for each expiry: the overlap length with ``[0, T]`` and the cross-term
    kernels with their weights, ``[(w, k)]``, such that the cross variance is
    ``2 sum_(w, k) w sum_j s_j k_j``: one ``(rho_f s_f, phi2(k_f; .) increments)`` per rate
    factor (:meth:`pqflow.models.rates.RatesModel.equity_loadings`). Arrays of shape
    ``expiry.shape + (n,)``."""
    pieces = [(weight, bucket_terms(ends, rate, expiry)) for weight, rate in rates.equity_loadings(correlation)]
    length = pieces[0][1][0]  # the overlaps do not depend on the rate
    return length, [(weight, cross) for weight, (_, cross) in pieces]


def cross_variance(
    terms: list[tuple[float, np.ndarray]], vols: np.ndarray, n: int | None = None
) -> np.ndarray:
    """``2 sum_(w, k) w sum_{j < n} s_j k_j`` (all buckets when ``n`` is None)."""
    cut = slice(None) if n is None else slice(0, n)
    return 2.0 * sum(w * np.sum(vols[cut] * k[..., cut], axis=-1) for w, k in terms)


def rate_variance(rates: RatesModel, t: np.ndarray | float) -> np.ndarray:
    """Variance of ``int_0^T (r - E r)``: ``V(T)`` of the rate model."""
    return rates.integrated_variance(t)


def forward_variance(
    rates: RatesModel,
    bucket_ends: np.ndarray,
    volatilities: np.ndarray,
    correlation: float | tuple[float, float],
    expiry: np.ndarray | float,
) -> np.ndarray:
    """``v(T)``: variance of ``ln(S_T e^{-qT} / P(T,T))`` under the ``T``-forward measure, for
    each expiry (any shape; the result has that shape). ``correlation``: one number with
    Hull-White ``rates``, the pair ``(rho_xS, rho_yS)`` with G2++ ``rates``. The equity
    volatility is ``volatilities[j]`` on ``(bucket_ends[j-1], bucket_ends[j]]`` (the first from 0)
    and flat after the last end.

    The one implementation of an index's forward variance: the volatility bootstrap
    (:mod:`pqflow.calibration.equity_vol`), the option closed forms below and the validation's
    guarantee closed form all use it."""
    t = np.asarray(expiry, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t < 0.0):
        raise ValueError("expiries must be finite and not negative")
    correlation = checked_correlation(rates, correlation, strict=False)
    length, terms = rate_terms(rates, correlation, np.asarray(bucket_ends, dtype=float), t)
    s = np.asarray(volatilities, dtype=float)
    equity = np.sum(s**2 * length, axis=-1)
    return equity + cross_variance(terms, s) + rate_variance(rates, t)




def schedule_buckets(volatility: float | PiecewiseConstant) -> tuple[np.ndarray, np.ndarray]:
    """``(bucket_ends, volatilities)`` of a volatility schedule for :func:`forward_variance`:
    the value on ``[knots[j], knots[j+1])`` becomes the bucket ending at ``knots[j+1]`` (the
    last bucket, flat after its end, ends one year after the last knot)."""
    sched = as_schedule(volatility)
    knots = np.asarray(sched.knots, dtype=float)
    ends = np.append(knots[1:], knots[-1] + 1.0)
    return ends, np.asarray(sched.values, dtype=float)


def equity_total_variance(rates: RateParams, equity: TotalReturnIndex, expiry: float) -> float:
    """Variance of ``ln(S_T / P(T, T))`` under the T-forward measure (:func:`forward_variance`
    with the index's volatility schedule); under Hull-White and a constant ``sigma_S``,

        sigma_S^2 T + 2 rho sigma_S sigma (T - B(T)) / a + V(T)."""
    ends, vols = schedule_buckets(equity.volatility)
    return float(forward_variance(rates, ends, vols, equity.rates_correlation, expiry))


def equity_option_price(
    curve: DiscountCurve,
    rates: RateParams,
    equity: TotalReturnIndex,
    *,
    expiry: float,
    strike: float,
    kind: str = "call",
) -> float:
    """European option on the price index ``S_T e^{-q T}`` with the given strike."""
    if not expiry > 0.0 or not strike > 0.0:
        raise ValueError("expiry and strike must be positive")
    df = float(curve.discount(expiry))
    forward = equity.level * np.exp(-equity.income_yield * expiry) / df
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

