"""Piecewise-constant equity volatility that reprices the market's implied vols under
Hull-White or G2++ rates.

Model (as in :mod:`pqflow.models.equity`, with a time-dependent equity volatility):

    d ln S_t = (r_t - q - sigma_S(t)^2 / 2) dt + sigma_S(t) dZ_t,     dZ dW = rho dt,

with ``W`` the Hull-White driver and ``sigma_S`` constant on each bucket
``(T_{j-1}, T_j]`` (``T_0 = 0``) and flat after the last bucket end.

Total variance. Let ``F_t = S_t e^{-q T} / P(t, T)`` be the forward price of the price index
for delivery at ``T``; it is a martingale under the ``T``-forward measure. Under Hull-White
``dP(t,T)/P(t,T) = r_t dt - sigma B(T-t) dW_t`` (Brigo and Mercurio, *Interest Rate Models -
Theory and Practice*, 2nd ed., 2006, ch. 3.3), so by Ito the martingale part of ``d ln F_t``
is ``sigma_S(t) dZ_t + sigma B(T-t) dW_t``. ``ln F_T`` is Gaussian with variance

    v(T) = int_0^T [sigma_S(u)^2 + 2 rho sigma sigma_S(u) B(T-u) + sigma^2 B(T-u)^2] du,
    B(u) = (1 - e^{-a u}) / a,

and ``F_T = S_T e^{-qT}`` (because ``P(T,T) = 1``). A European option paid at ``T`` is therefore
worth Black's formula on ``F_0 = S_0 e^{-qT} / P(0,T)`` with total variance ``v(T)``, discounted
by ``P(0,T)``. On bucket ``j`` with vol ``s_j`` the three terms integrate to

    s_j^2 (hi_j - lo_j)
    + 2 rho sigma s_j [phi2(T - lo_j) - phi2(T - hi_j)]        (phi2(u) = int_0^u B = (u - B(u))/a)
    and, over the whole of [0, T], V(T) = sigma^2/a^2 [T - 2B(T) + (1 - e^{-2aT})/(2a)],

with ``lo_j = min(T_{j-1}, T)``, ``hi_j = min(T_j, T)`` (the last bucket runs to ``T``). With one
bucket this is :func:`pqflow.models.equity.equity_total_variance`.

G2++ rates (:mod:`pqflow.models.g2pp`, ``r = x + y + phi``, ``dx = -a x dt + sigma dW1``,
``dy = -b y dt + eta dW2``). Pass ``rates`` as :class:`pqflow.models.g2pp.G2PlusPlusParams` and
``correlation`` as the pair ``(rho_xS, rho_yS)``: the correlations of the equity shock ``Z``
with ``W1`` and ``W2``. Then ``dP(t,T)/P(t,T) = r dt - sigma B_a(T-t) dW1 - eta B_b(T-t) dW2``
(Brigo and Mercurio 2006, ch. 4.2), the martingale part of ``d ln F_t`` is
``sigma_S dZ + sigma B_a(T-t) dW1 + eta B_b(T-t) dW2`` and

    v(T) = int_0^T sigma_S^2 du + 2 int_0^T sigma_S(u) [rho_xS sigma B_a(T-u) + rho_yS eta B_b(T-u)] du
           + V_G2(T),

``V_G2`` the variance of ``int_0^T (x + y)`` (:func:`pqflow.models.g2pp.integrated_variance`).
Bucket ``j`` contributes the cross term
``2 s_j {rho_xS sigma [phi2(a; T - lo_j) - phi2(a; T - hi_j)] + rho_yS eta [phi2(b; T - lo_j) -
phi2(b; T - hi_j)]}``: the same structure as under Hull-White, so everything below holds with
``rho sigma phi2(.)`` read as that sum. The correlation matrix of ``(W1, W2, Z)`` must be
positive semi-definite (positive definite to calibrate, as the simulation needs). Passing a
single number with G2++ parameters, or a pair with Hull-White ones, is a ``ValueError``.

Calibration. The market quotes a Black-Scholes implied vol ``sigma_imp`` with deterministic
rates: its price is Black's formula on the same forward ``F_0`` with total variance
``sigma_imp^2 T``. The model reprices the quote exactly when ``v(T) = sigma_imp^2 T``, whatever
the strike, so quotes may be at-the-money-forward (``K = F_0``, the default here) or
at-the-money-spot (``K = S_0``) or any strike: the strike only changes the reported prices.
Bootstrapping by increasing maturity, bucket ``j`` solves the quadratic

    c2 s^2 + 2 c1 s + c0 = 0,   c2 = T_j - T_{j-1},   c1 = rho sigma [phi2(T_j - T_{j-1}) - 0],
    c0 = (known buckets' equity and cross terms at T_j) + V(T_j) - sigma_imp^2 T_j,

for the root ``s = (-c1 + sqrt(c1^2 - c2 c0)) / c2``: the only positive root when ``c0 < 0``,
the larger of two when ``c0 > 0`` and ``c1 < 0``, and in every case the root continuous in the
quote. No positive root means the rate volatility (with this correlation) alone gives at least
the market's variance, or that the market variance is below the minimum the model can reach:
the quote is inconsistent with the rates, and we raise :class:`pqflow.errors.MarketDataError`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from pqflow.calibration.formulas import black_implied_vol, black_price
from pqflow.errors import MarketDataError
from pqflow.market.curve import DiscountCurve
from pqflow.models.equity import (
    checked_correlation,
    cross_variance,
    forward_variance,
    rate_terms,
    rate_variance,
)
from pqflow.models.rates import RatesModel

__all__ = [
    "PiecewiseEquityVolatility",
    "EquityVolQuote",
    "EquityVolFitRow",
    "EquityVolFitReport",
    "piecewise_equity_total_variance",
    "equity_option_price_piecewise",
    "calibrate_equity_volatility",
]

@dataclass(frozen=True, kw_only=True)
class PiecewiseEquityVolatility:
    """``sigma_S(t) = volatilities[j]`` for ``t`` in ``(bucket_ends[j-1], bucket_ends[j]]``
    (the first bucket starting at 0), and ``volatilities[-1]`` after the last end.

    bucket_ends: strictly increasing positive times in years, shape ``(n,)``.
    volatilities: positive, shape ``(n,)``.
    """

    bucket_ends: np.ndarray
    volatilities: np.ndarray

    def __post_init__(self) -> None:
        ends = np.atleast_1d(np.array(self.bucket_ends, dtype=float))  # copies: we freeze them
        vols = np.atleast_1d(np.array(self.volatilities, dtype=float))
        if ends.ndim != 1 or ends.shape != vols.shape or ends.size == 0:
            raise ValueError("bucket_ends and volatilities must be 1-d arrays of one length")
        if not np.all(np.isfinite(ends)) or ends[0] <= 0.0 or np.any(np.diff(ends) <= 0.0):
            raise ValueError("bucket ends must be positive and strictly increasing")
        if not np.all(np.isfinite(vols)) or np.any(vols <= 0.0):
            raise ValueError("bucket volatilities must be positive")
        ends.flags.writeable = False
        vols.flags.writeable = False
        object.__setattr__(self, "bucket_ends", ends)
        object.__setattr__(self, "volatilities", vols)

    @classmethod
    def constant(cls, volatility: float, horizon: float = 1.0) -> PiecewiseEquityVolatility:
        """One bucket: the constant volatility of :class:`pqflow.models.total_return.TotalReturnIndex`."""
        return cls(bucket_ends=np.array([horizon]), volatilities=np.array([volatility]))

    def __call__(self, t: np.ndarray | float) -> np.ndarray:
        """``sigma_S(t)`` for each ``t >= 0`` (any shape; ``t = 0`` gives the first bucket)."""
        t = np.asarray(t, dtype=float)
        idx = np.searchsorted(self.bucket_ends, t, side="left")
        return self.volatilities[np.minimum(idx, self.volatilities.size - 1)]


def piecewise_equity_total_variance(
    rates: RatesModel,
    volatility: PiecewiseEquityVolatility,
    correlation: float | tuple[float, float],
    expiry: np.ndarray | float,
) -> np.ndarray:
    """``v(T)``: variance of ``ln(S_T e^{-qT} / P(T,T))`` under the ``T``-forward measure, for
    each expiry (any shape; the result has that shape): :func:`pqflow.models.equity.forward_variance`
    on the buckets. ``correlation``: one number with Hull-White ``rates``, the pair
    ``(rho_xS, rho_yS)`` with G2++ ``rates``."""
    return forward_variance(rates, volatility.bucket_ends, volatility.volatilities, correlation, expiry)


def equity_option_price_piecewise(
    curve: DiscountCurve,
    rates: RatesModel,
    *,
    level: float,
    dividend_yield: float,
    correlation: float | tuple[float, float],
    volatility: PiecewiseEquityVolatility,
    expiry: np.ndarray | float,
    strike: np.ndarray | float,
    kind: str = "call",
) -> np.ndarray:
    """European option on the price index ``S_T e^{-qT}`` paid at ``T``, with piecewise-constant
    equity vol under Hull-White or G2++ rates: Black on ``S_0 e^{-qT}/P(0,T)`` with variance
    ``v(T)`` (:func:`piecewise_equity_total_variance`; ``correlation`` as there).

    expiry and strike broadcast together (any shapes); the result has the broadcast shape.
    """
    if not level > 0.0:
        raise ValueError("equity level must be positive")
    t, k = np.broadcast_arrays(np.asarray(expiry, dtype=float), np.asarray(strike, dtype=float))
    if np.any(~(t > 0.0)) or np.any(~(k > 0.0)):
        raise ValueError("expiry and strike must be positive")
    df = curve.discount(t)
    forward = level * np.exp(-dividend_yield * t) / df
    var = piecewise_equity_total_variance(rates, volatility, correlation, t)
    return black_price(forward, k, np.sqrt(var / t), t, annuity=df, kind=kind)


@dataclass(frozen=True, kw_only=True)
class EquityVolQuote:
    """A Black-Scholes implied volatility (decimal) of a European option on the price index
    expiring at ``expiry`` years; ``strike=None`` means at the money forward."""

    expiry: float
    implied_vol: float
    strike: float | None = None

    def __post_init__(self) -> None:
        if not (np.isfinite(self.expiry) and self.expiry > 0.0):
            raise MarketDataError(f"equity vol quote: expiry {self.expiry!r} must be positive")
        if not (np.isfinite(self.implied_vol) and self.implied_vol > 0.0):
            raise MarketDataError(
                f"equity vol quote {self.expiry:g}y: implied vol {self.implied_vol!r} must be "
                "positive (a decimal: 20% is 0.20)"
            )
        if self.strike is not None and not (np.isfinite(self.strike) and self.strike > 0.0):
            raise MarketDataError(f"equity vol quote {self.expiry:g}y: strike must be positive")


@dataclass(frozen=True, kw_only=True)
class EquityVolFitRow:
    """One quote repriced. Variances are total variances to the expiry: ``rate_variance`` is
    ``V(T)``, ``cross_variance`` the correlation term, ``equity_variance`` the rest.
    ``vol_error`` is model minus market implied vol (decimal); prices per unit of index."""

    expiry: float
    strike: float
    market_vol: float
    model_vol: float
    vol_error: float
    market_price: float
    model_price: float
    equity_variance: float
    cross_variance: float
    rate_variance: float


@dataclass(frozen=True, kw_only=True)
class EquityVolFitReport:
    """The bootstrapped equity volatility and how each quote reprices.

    volatility: per-bucket vols, buckets ending at the quoted expiries. rows: one per quote, by
    increasing expiry. max_abs_vol_error: largest ``|vol_error|``. correlation and rates as
    given: one number with Hull-White parameters, ``(rho_xS, rho_yS)`` with G2++ parameters.
    """

    volatility: PiecewiseEquityVolatility
    correlation: float | tuple[float, float]
    rates: RatesModel
    rows: tuple[EquityVolFitRow, ...]
    max_abs_vol_error: float

    @property
    def bucket_ends(self) -> np.ndarray:
        return self.volatility.bucket_ends

    @property
    def bucket_vols(self) -> np.ndarray:
        return self.volatility.volatilities

    def as_records(self) -> list[dict[str, Any]]:
        """The rows as plain dictionaries (for tables and JSON)."""
        return [dict(vars(r)) for r in self.rows]


def _positive_root(c2: float, c1: float, c0: float) -> float | None:
    """The root ``(-c1 + sqrt(c1^2 - c2 c0)) / c2`` of ``c2 s^2 + 2 c1 s + c0`` if real and
    positive, in the form without cancellation; ``None`` otherwise."""
    disc = c1 * c1 - c2 * c0
    if disc < 0.0:
        return None
    root = np.sqrt(disc)
    s = -c0 / (c1 + root) if c1 > 0.0 else (root - c1) / c2
    return float(s) if s > 0.0 else None


def calibrate_equity_volatility(
    curve: DiscountCurve,
    rates: RatesModel,
    *,
    level: float,
    dividend_yield: float,
    correlation: float | tuple[float, float],
    quotes: Sequence[EquityVolQuote],
) -> EquityVolFitReport:
    """Bootstrap ``sigma_S(t)``, one bucket per quote, so that every quote reprices exactly.

    rates: Hull-White parameters with ``correlation`` one number (equity vs short-rate shock),
    or G2++ parameters with ``correlation`` the pair ``(rho_xS, rho_yS)`` (equity vs ``W1``,
    ``W2``); a mismatch is a ``ValueError``. quotes: any order; their expiries must be distinct.
    The reported model vol is the Black-Scholes implied vol of the model's closed-form price, so
    ``vol_error`` checks the whole chain, not only the variance equation.
    """
    if not quotes:
        raise MarketDataError("no equity vol quotes to calibrate to")
    correlation = checked_correlation(rates, correlation, strict=True)
    ordered = sorted(quotes, key=lambda q: q.expiry)
    ends = np.array([q.expiry for q in ordered])
    if np.any(np.diff(ends) <= 0.0):
        raise MarketDataError(
            f"equity vol quotes need distinct expiries, got {sorted(ends.tolist())}"
        )
    if ends[-1] > curve.max_maturity * (1.0 + 1e-12):
        raise MarketDataError(
            f"equity vol quotes run to {ends[-1]:g} years but the curve ends at "
            f"{curve.max_maturity:g}"
        )
    vols = np.zeros(ends.size)
    starts = np.concatenate(([0.0], ends[:-1]))
    for j, q in enumerate(ordered):
        t = q.expiry
        length, terms = rate_terms(rates, correlation, ends[: j + 1], np.asarray(t))
        known = float(np.sum(vols[:j] ** 2 * length[:j]) + cross_variance(terms, vols[:j], j))
        rate_var = float(rate_variance(rates, t))
        market_var = q.implied_vol**2 * t
        c2 = float(length[j])
        c1 = float(sum(w * float(k[j]) for w, k in terms))
        c0 = known + rate_var - market_var
        s = _positive_root(c2, c1, c0)
        if s is None:
            floor = known + rate_var - (c1 * c1 / c2 if c1 < 0.0 else 0.0)
            raise MarketDataError(
                f"equity vol quote {t:g}y ({q.implied_vol:.4%}): no positive equity volatility "
                f"on ({starts[j]:g}, {t:g}] reprices it. The market total variance "
                f"{market_var:.6g} is at or below {floor:.6g}, the least the model reaches with "
                f"{rates.describe_with_equity(correlation)} and the earlier buckets: the quote is "
                "inconsistent with the rate volatility"
            )
        vols[j] = s
    volatility = PiecewiseEquityVolatility(bucket_ends=ends, volatilities=vols)

    rows = []
    for q in ordered:
        t = q.expiry
        df = float(curve.discount(t))
        fwd = level * np.exp(-dividend_yield * t) / df
        k = fwd if q.strike is None else q.strike
        kind = "call" if k >= fwd else "put"  # the out-of-the-money side inverts best
        market_price = float(black_price(fwd, k, q.implied_vol, t, annuity=df, kind=kind))
        model_price = float(equity_option_price_piecewise(
            curve, rates, level=level, dividend_yield=dividend_yield, correlation=correlation,
            volatility=volatility, expiry=t, strike=k, kind=kind,
        ))
        model_vol = float(black_implied_vol(model_price, fwd, k, t, annuity=df, kind=kind))
        length, terms = rate_terms(rates, correlation, ends, np.asarray(t))
        rows.append(EquityVolFitRow(
            expiry=t, strike=float(k), market_vol=q.implied_vol, model_vol=model_vol,
            vol_error=model_vol - q.implied_vol, market_price=market_price,
            model_price=model_price,
            equity_variance=float(np.sum(vols**2 * length)),
            cross_variance=float(cross_variance(terms, vols)),
            rate_variance=float(rate_variance(rates, t)),
        ))
    return EquityVolFitReport(
        volatility=volatility,
        correlation=correlation,
        rates=rates,
        rows=tuple(rows),
        max_abs_vol_error=max(abs(r.vol_error) for r in rows),
    )
