"""Heston parameters fitted to an index's implied-volatility smile under Hull-White or G2++ rates.

Quotes are Black-Scholes implied vols of European options on the price index at strikes
given as moneyness ``K / F`` (``F = S_0 e^{-qT} / P(0,T)``, the forward) for several expiries.
The model price is :func:`pqflow.models.heston.heston_option_price` with the run's rates: exact
when the index is uncorrelated with the rate drivers, Grzelak and Oosterlee's H1-HW otherwise
(the model's docstring; its error against Monte Carlo is stated in the README).

Objective: weighted least squares in vol points, linearised through the Black vega,

    min over (v0, kappa, theta, xi, rho) of  sum_i w_i [(C_model,i - C_market,i) / vega_i]^2,

(the vega-scaled price difference equals the implied-vol difference to first order and needs no
implied-vol inversion per iteration; common practice), within configurable bounds, by
``scipy.optimize.least_squares`` (trust-region reflective). Each quote is priced on its
out-of-the-money side. The report then inverts every model price exactly: market, model and
difference in vol points (1 vol point = 0.01), the weighted RMSE, and the Feller ratio
``2 kappa theta / xi^2`` (below 1 the variance reaches zero; the fit does not impose Feller's
condition, it reports it).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import least_squares
from scipy.stats import norm

from pqflow.calibration.formulas import black_implied_vol, black_price
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.market.curve import DiscountCurve
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.heston import HestonParams, heston_option_price, rate_log_cf_variance
from pqflow.models.hull_white import HullWhiteParams

__all__ = [
    "HestonQuote",
    "HestonBounds",
    "HestonFitRow",
    "HestonFitReport",
    "calibrate_heston",
]

PARAMETERS = ("v0", "kappa", "theta", "xi", "rho")


@dataclass(frozen=True, kw_only=True)
class HestonQuote:
    """One implied vol (decimal) at ``expiry`` years and moneyness ``K / F``; ``weight`` >= 0."""

    expiry: float
    moneyness: float
    implied_vol: float
    weight: float = 1.0

    def __post_init__(self) -> None:
        if not (np.isfinite(self.expiry) and self.expiry > 0.0):
            raise MarketDataError(f"smile quote: expiry {self.expiry!r} must be positive")
        if not (np.isfinite(self.moneyness) and self.moneyness > 0.0):
            raise MarketDataError(f"smile quote {self.expiry:g}y: moneyness {self.moneyness!r} must be positive")
        if not (np.isfinite(self.implied_vol) and self.implied_vol > 0.0):
            raise MarketDataError(f"smile quote {self.expiry:g}y: implied vol {self.implied_vol!r} must be positive")
        if not (np.isfinite(self.weight) and self.weight >= 0.0):
            raise MarketDataError(f"smile quote {self.expiry:g}y: weight {self.weight!r} must not be negative")


@dataclass(frozen=True, kw_only=True)
class HestonBounds:
    """Lower and upper bound of each parameter, and the starting point (inside the bounds)."""

    lower: tuple[float, float, float, float, float] = (1e-4, 0.05, 1e-4, 0.01, -0.99)
    upper: tuple[float, float, float, float, float] = (1.0, 10.0, 1.0, 2.0, 0.99)
    initial: tuple[float, float, float, float, float] = (0.04, 1.5, 0.04, 0.5, -0.5)

    def __post_init__(self) -> None:
        for name, lo, hi, x0 in zip(PARAMETERS, self.lower, self.upper, self.initial, strict=True):
            if not lo < hi:
                raise ValueError(f"Heston bounds for {name}: lower {lo:g} must be below upper {hi:g}")
            if not lo <= x0 <= hi:
                raise ValueError(f"Heston starting value {name} = {x0:g} lies outside [{lo:g}, {hi:g}]")
        if self.lower[0] <= 0.0 or self.lower[1] <= 0.0 or self.lower[2] <= 0.0 or self.lower[3] <= 0.0:
            raise ValueError("Heston lower bounds of v0, kappa, theta and xi must be positive")
        if self.lower[4] <= -1.0 or self.upper[4] >= 1.0:
            raise ValueError("Heston bounds of rho must lie strictly inside (-1, 1)")


@dataclass(frozen=True, kw_only=True)
class HestonFitRow:
    """One quote repriced: vols in decimals, ``vol_points`` the difference model - market in
    vol points (0.01); prices in index points (for the given level), on the quote's
    out-of-the-money side."""

    expiry: float
    moneyness: float
    strike: float
    kind: str
    weight: float
    market_vol: float
    model_vol: float
    vol_points: float
    market_price: float
    model_price: float


@dataclass(frozen=True, kw_only=True)
class HestonFitReport:
    params: HestonParams
    rows: tuple[HestonFitRow, ...]
    rmse_vol_points: float
    max_abs_vol_points: float
    pricing: str
    converged: bool
    message: str
    at_bounds: tuple[str, ...] = field(default=())

    @property
    def feller_ratio(self) -> float:
        return self.params.feller_ratio

    def to_json(self) -> dict[str, Any]:
        return {
            "method": "Heston (v0, kappa, theta, xi, rho) by weighted least squares in vol points "
            f"(vega-linearised); prices: {self.pricing}",
            "parameters": self.params.as_dict(),
            "feller_ratio": self.feller_ratio,
            "rmse_vol_points": self.rmse_vol_points,
            "max_abs_vol_points": self.max_abs_vol_points,
            "converged": self.converged,
            "message": self.message,
            "at_bounds": list(self.at_bounds),
            "rows": [dict(vars(r)) for r in self.rows],
        }


def _pricing_label(rates, correlation, p: HestonParams, expiry: float) -> str:
    if rates is None:
        return "deterministic rates (exact)"
    exact = rate_log_cf_variance(p, rates, correlation, expiry)[1]
    name = rates.label
    if exact:
        return f"{name} rates uncorrelated with the index (exact characteristic function)"
    return f"{name} rates correlated with the index (H1-HW approximation, Grzelak and Oosterlee 2011)"


def calibrate_heston(
    curve: DiscountCurve,
    rates: HullWhiteParams | G2PlusPlusParams | None,
    *,
    level: float,
    dividend_yield: float,
    correlation: float | tuple[float, float],
    quotes: Sequence[HestonQuote],
    bounds: HestonBounds = HestonBounds(),
    label: str = "index",
) -> HestonFitReport:
    """Fit the Heston parameters to ``quotes`` (module docstring). ``rates`` ``None`` means
    deterministic rates; ``correlation`` the index's correlation with the rate driver(s).
    Raises :class:`CalibrationError` (naming ``label``) when there are fewer quotes with
    positive weight than parameters."""
    live = [q for q in quotes if q.weight > 0.0]
    if len(live) < len(PARAMETERS):
        raise CalibrationError(
            f"{label}: a Heston fit needs at least {len(PARAMETERS)} quotes with positive weight, got {len(live)}"
        )
    t = np.array([q.expiry for q in quotes])
    if t.max() > curve.max_maturity * (1.0 + 1e-12):
        raise MarketDataError(f"{label}: smile quotes run to {t.max():g} years but the curve ends at "
                              f"{curve.max_maturity:g}")
    m = np.array([q.moneyness for q in quotes])
    vol = np.array([q.implied_vol for q in quotes])
    w = np.array([q.weight for q in quotes])
    df = curve.discount(t)
    fwd = level * np.exp(-dividend_yield * t) / df
    k = m * fwd
    kind = np.where(m >= 1.0, "call", "put")
    market = np.array([float(black_price(f, kk, v, tt, annuity=d, kind=str(c)))
                       for f, kk, v, tt, d, c in zip(fwd, k, vol, t, df, kind, strict=True)])
    sd = vol * np.sqrt(t)
    vega = df * fwd * norm.pdf(np.log(fwd / k) / sd + 0.5 * sd) * np.sqrt(t)
    sw = np.sqrt(w) / vega

    def model(x: np.ndarray, tight: bool = False) -> np.ndarray:
        p = HestonParams(**dict(zip(PARAMETERS, (float(v) for v in x), strict=True)))
        return heston_option_price(p, level=level, dividend_yield=dividend_yield, discount=df, expiry=t,
                                   strike=k, kind=kind, rates=rates, correlation=correlation)

    def residuals(x: np.ndarray) -> np.ndarray:
        return sw * (model(x) - market)

    lo, hi = np.array(bounds.lower), np.array(bounds.upper)
    try:
        sol = least_squares(residuals, np.array(bounds.initial), bounds=(lo, hi), x_scale="jac",
                            xtol=1e-10, ftol=1e-12, gtol=1e-10, max_nfev=400)
    except (ValueError, FloatingPointError) as exc:
        raise CalibrationError(f"{label}: the Heston fit failed: {exc}") from None
    params = HestonParams(**dict(zip(PARAMETERS, (float(v) for v in sol.x), strict=True)))
    prices = model(sol.x)
    rows = []
    for i in range(t.size):
        try:
            mv = float(black_implied_vol(prices[i], fwd[i], k[i], t[i], annuity=df[i], kind=str(kind[i])))
        except MarketDataError:
            mv = float("nan")
        rows.append(HestonFitRow(
            expiry=float(t[i]), moneyness=float(m[i]), strike=float(k[i]), kind=str(kind[i]), weight=float(w[i]),
            market_vol=float(vol[i]), model_vol=mv, vol_points=(mv - vol[i]) * 100.0,
            market_price=float(market[i]), model_price=float(prices[i]),
        ))
    diffs = np.array([r.vol_points for r in rows])
    rmse = float(np.sqrt(np.sum(w * diffs**2) / np.sum(w)))
    span = hi - lo
    at = tuple(n for n, x, a, b, s in zip(PARAMETERS, sol.x, lo, hi, span, strict=True) if min(x - a, b - x) < 1e-6 * s)
    return HestonFitReport(
        params=params, rows=tuple(rows), rmse_vol_points=rmse,
        max_abs_vol_points=float(np.nanmax(np.abs(diffs))),
        pricing=_pricing_label(rates, correlation, params, float(t.max())),
        converged=bool(sol.success), message=str(sol.message), at_bounds=at,
    )
