"""Inflation calibration for the Jarrow-Yildirim model: the real curve and the volatilities.

Real curve (exact). A zero-coupon inflation-indexed swap (ZCIIS) of maturity ``T`` and quoted
rate ``k`` (annual compounding) exchanges ``(1 + k)^T - 1`` for ``I_T / I_0 - 1`` at ``T``. The
index leg is worth ``P_r(0, T) - P_n(0, T)`` in any model (Brigo and Mercurio, *Interest Rate
Models - Theory and Practice*, 2nd ed., 2006, ch. 15.2), so a fair quote fixes the real discount
factor

    P_r(0, T) = P_n(0, T) (1 + k(T))^T

at every quoted maturity (common practice). The real curve is a
:class:`pqflow.market.curve.LogDiscountCurve` through those factors: it reprices every quote
exactly and interpolates ``ln P_r`` between them. Times run from the index's base date: the
indexation lag of the quoted swaps (typically three months) is the caller's to apply.

Volatilities (least squares). Year-on-year caps and floors of whole-year maturity ``N`` (annual
caplets on ``[i - 1, i]``, ``i = 1 .. N``, accrual 1) are priced in closed form by
:func:`pqflow.models.jarrow_yildirim.yoy_cap_price`. A quote is either a price per unit notional
or a flat volatility in one of the conventions of :mod:`pqflow.calibration.formulas` on the
market's year-on-year forwards (one per caplet, from the market's YoY swap curve; a vol is only a
price once its forwards are known): each caplet ``i`` is worth
``P_n(0, i) option_price(convention, F_i, K, vol, expiry=i)``. The fitted parameters (any of
``inflation_volatility``, ``real_mean_reversion``, ``real_volatility``; the nominal Hull-White
parameters and the three correlations are held at their given values) minimise
``sum w_j (model_j - market_j)^2`` with prices in basis points of notional, by
``scipy.optimize.least_squares`` within bounds. The report gives the repricing of every quote,
and for vol quotes the model's flat vol in the quote's convention on the same market forwards.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy.optimize import brentq, least_squares

from pqflow.calibration.formulas import VOL_CONVENTIONS, option_price
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.market.curve import DiscountCurve, LogDiscountCurve
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.jarrow_yildirim import JarrowYildirimParams, yoy_caplet_price, zciis_rate

__all__ = [
    "INFLATION_PARAMETER_NAMES",
    "ZeroCouponInflationSwapQuote",
    "ZciisFitRow",
    "RealCurveFit",
    "real_curve_from_zc_inflation_swaps",
    "YoYCapFloorQuote",
    "yoy_quote_price",
    "YoYCapFloorFitRow",
    "InflationFitReport",
    "calibrate_jarrow_yildirim",
]

INFLATION_PARAMETER_NAMES: tuple[str, ...] = (
    "inflation_volatility",
    "real_mean_reversion",
    "real_volatility",
)
_BP = 1e-4
_WHOLE = 1e-9


# --------------------------------------------------------------------------------------------
# The real curve from zero-coupon inflation swaps
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class ZeroCouponInflationSwapQuote:
    """A ZCIIS quote: ``maturity`` in years (> 0) and the fair ``rate`` k, annually compounded,
    as a decimal (2.5% is ``0.025``)."""

    maturity: float
    rate: float

    def __post_init__(self) -> None:
        if not (np.isfinite(self.maturity) and self.maturity > 0.0):
            raise MarketDataError(f"ZC inflation swap quote: maturity {self.maturity!r} must be positive")
        if not (np.isfinite(self.rate) and self.rate > -1.0):
            raise MarketDataError(
                f"ZC inflation swap quote {self.maturity:g}y: rate {self.rate!r} must be a decimal "
                "above -100% (2.5% is 0.025)"
            )
        if abs(self.rate) > 1.0:
            raise MarketDataError(
                f"ZC inflation swap quote {self.maturity:g}y: rate {self.rate:g} is implausibly "
                "large; rates are decimals (2.5% is 0.025, not 2.5)"
            )


@dataclass(frozen=True, kw_only=True)
class ZciisFitRow:
    """Repricing of one ZCIIS quote: rates are decimals, ``difference_bp`` is model minus market
    in basis points; the discount factors are those at the quote's maturity."""

    maturity: float
    market_rate: float
    model_rate: float
    difference_bp: float
    nominal_discount_factor: float
    real_discount_factor: float


@dataclass(frozen=True, kw_only=True)
class RealCurveFit:
    """The real curve built from ZCIIS quotes and its repricing of each quote (input order)."""

    curve: LogDiscountCurve
    rows: tuple[ZciisFitRow, ...]
    max_abs_difference_bp: float

    def as_records(self) -> list[dict[str, Any]]:
        """The rows as plain dictionaries (for tables and JSON)."""
        return [dict(vars(r)) for r in self.rows]


def real_curve_from_zc_inflation_swaps(
    nominal_curve: DiscountCurve, quotes: Sequence[ZeroCouponInflationSwapQuote]
) -> RealCurveFit:
    """Real discount curve ``P_r(0, T) = P_n(0, T) (1 + k(T))^T`` through the quoted maturities
    (strictly increasing, within the nominal curve), with the repricing of every quote."""
    quotes = tuple(quotes)
    if not quotes:
        raise MarketDataError("no ZC inflation swap quotes to build the real curve from")
    t = np.array([q.maturity for q in quotes])
    k = np.array([q.rate for q in quotes])
    if np.any(np.diff(t) <= 0.0):
        raise MarketDataError(
            f"ZC inflation swap maturities must be strictly increasing, got {t.tolist()}"
        )
    if t[-1] > nominal_curve.max_maturity * (1.0 + 1e-12):
        raise MarketDataError(
            f"ZC inflation swaps run to {t[-1]:g} years but the nominal curve ends at "
            f"{nominal_curve.max_maturity:g}"
        )
    p_n = np.asarray(nominal_curve.discount(t), dtype=float)
    p_r = p_n * (1.0 + k) ** t
    curve = LogDiscountCurve(maturities=t, discount_factors=p_r)
    model = np.asarray(zciis_rate(nominal_curve, curve, t), dtype=float)
    diff = (model - k) / _BP
    rows = tuple(
        ZciisFitRow(
            maturity=float(ti), market_rate=float(ki), model_rate=float(mi), difference_bp=float(di),
            nominal_discount_factor=float(pn), real_discount_factor=float(pr),
        )
        for ti, ki, mi, di, pn, pr in zip(t, k, model, diff, p_n, curve.discount(t), strict=True)
    )
    return RealCurveFit(curve=curve, rows=rows, max_abs_difference_bp=float(np.max(np.abs(diff))))


# --------------------------------------------------------------------------------------------
# Year-on-year caps and floors
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class YoYCapFloorQuote:
    """A year-on-year cap or floor of ``maturity`` whole years (annual caplets) struck at
    ``strike`` (a decimal YoY rate, > -100%); ``kind`` is ``"cap"`` or ``"floor"``.

    Give either ``price`` (per unit notional, > 0) or ``vol`` with its ``convention`` (one of
    ``normal``, ``lognormal``, ``shifted_lognormal``; normal vols in basis points, 85 bp is
    ``85.0``, the others as decimals), the lognormal ``shift`` if any, and ``forwards``: the
    market's YoY forward rates of the ``maturity`` caplets that the vol was quoted on.
    weight: its weight in the least-squares fit (not negative).
    """

    maturity: float
    strike: float
    kind: str
    price: float | None = None
    vol: float | None = None
    convention: str | None = None
    shift: float = 0.0
    forwards: tuple[float, ...] | None = None
    weight: float = 1.0

    def __post_init__(self) -> None:
        where = f"YoY {self.kind} quote {self.maturity:g}y at {self.strike:g}"
        n = int(round(self.maturity)) if np.isfinite(self.maturity) else 0
        if n < 1 or abs(self.maturity - n) > _WHOLE * max(1.0, self.maturity):
            raise MarketDataError(f"{where}: maturity must be a whole number of years (at least 1)")
        if self.kind not in ("cap", "floor"):
            raise MarketDataError(f"{where}: kind must be 'cap' or 'floor', not {self.kind!r}")
        if not (np.isfinite(self.strike) and self.strike > -1.0):
            raise MarketDataError(f"{where}: strike must be a decimal rate above -100%")
        if (self.price is None) == (self.vol is None):
            raise MarketDataError(f"{where}: give exactly one of price and vol")
        if self.price is not None:
            if not (np.isfinite(self.price) and self.price > 0.0):
                raise MarketDataError(f"{where}: price must be positive (per unit notional)")
            if self.convention is not None or self.forwards is not None or self.shift != 0.0:
                raise MarketDataError(f"{where}: a price quote takes no convention, shift or forwards")
        else:
            if self.vol is None:
                raise MarketDataError(f"{where}: give exactly one of price and vol")
            if self.convention not in VOL_CONVENTIONS:
                raise MarketDataError(
                    f"{where}: convention must be one of {VOL_CONVENTIONS}, not {self.convention!r}"
                )
            if not (np.isfinite(self.vol) and self.vol > 0.0):
                raise MarketDataError(f"{where}: vol must be positive")
            if self.convention == "normal" and self.vol < 0.1:
                raise MarketDataError(
                    f"{where}: normal vol {self.vol:g} bp is implausibly small; normal vols are "
                    "quoted in basis points (85 bp is 85.0, not 0.0085)"
                )
            if self.convention != "shifted_lognormal" and self.shift != 0.0:
                raise MarketDataError(f"{where}: only a 'shifted_lognormal' quote takes a shift")
            if self.forwards is None or len(self.forwards) != n:
                raise MarketDataError(
                    f"{where}: a vol quote needs the market's {n} YoY forward rates, one per caplet"
                )
            fwd = np.asarray(self.forwards, dtype=float)
            if not np.all(np.isfinite(fwd)):
                raise MarketDataError(f"{where}: forwards must be finite")
            if self.convention != "normal" and (
                np.any(fwd + self.shift <= 0.0) or self.strike + self.shift <= 0.0
            ):
                raise MarketDataError(
                    f"{where}: forwards and strike plus shift must be positive for a "
                    f"{self.convention} vol"
                )
            object.__setattr__(self, "forwards", tuple(float(f) for f in fwd))
        if not (np.isfinite(self.weight) and self.weight >= 0.0):
            raise MarketDataError(f"{where}: weight must not be negative")

    @property
    def n_caplets(self) -> int:
        return int(round(self.maturity))

    @property
    def vol_decimal(self) -> float | None:
        """The volatility as an absolute decimal (normal vols divided by 10,000)."""
        if self.vol is None:
            return None
        return self.vol * _BP if self.convention == "normal" else self.vol


def _flat_vol_price(nominal_curve: DiscountCurve, quote: YoYCapFloorQuote, vol_decimal: float) -> float:
    """``sum_i P_n(0, i) option_price(convention, F_i, K, vol, i)`` (accrual 1)."""
    if quote.convention is None or quote.forwards is None:
        raise RuntimeError("a volatility quote carries its convention and forwards (checked when it was read)")
    pay = np.arange(1, quote.n_caplets + 1, dtype=float)
    kind = "call" if quote.kind == "cap" else "put"
    prices = option_price(
        quote.convention, np.asarray(quote.forwards), quote.strike, vol_decimal, pay,
        annuity=nominal_curve.discount(pay), kind=kind, shift=quote.shift,
    )
    return float(np.sum(prices))


def yoy_quote_price(nominal_curve: DiscountCurve, quote: YoYCapFloorQuote) -> float:
    """Market price per unit notional of a quote: its price, or its flat vol in its convention
    on its forwards, discounted on the nominal curve."""
    if quote.price is not None:
        return float(quote.price)
    vol = quote.vol_decimal
    if vol is None:
        raise RuntimeError("a cap/floor quote has a price or a volatility (checked when it was read)")
    return _flat_vol_price(nominal_curve, quote, vol)


def _implied_flat_vol(nominal_curve: DiscountCurve, quote: YoYCapFloorQuote, price: float) -> float:
    """Flat vol (quote units) whose price on the quote's forwards is ``price``; NaN when the
    price lies outside what the convention can reach on those forwards."""
    lo = _flat_vol_price(nominal_curve, quote, 1e-12)
    if not price > lo:
        return float("nan")
    hi = 2.0 * (quote.vol_decimal or 0.01)
    for _ in range(60):
        if _flat_vol_price(nominal_curve, quote, hi) > price:
            break
        hi *= 2.0
    else:
        return float("nan")
    vol = brentq(lambda v: _flat_vol_price(nominal_curve, quote, v) - price, 1e-12, hi,
                 xtol=1e-15, rtol=1e-13, maxiter=500)
    return float(vol / _BP if quote.convention == "normal" else vol)


@dataclass(frozen=True, kw_only=True)
class YoYCapFloorFitRow:
    """The fit of one quote. Prices per unit notional; ``price_difference_bp`` is model minus
    market in basis points of notional. For vol quotes ``market_vol`` and ``model_vol`` are in
    the quote's units (``model_vol``: the flat vol that gives the model price on the quote's
    forwards; NaN if none does) and ``vol_difference_bp`` is their difference in basis points
    of volatility; all three are ``None`` for price quotes."""

    maturity: float
    strike: float
    kind: str
    market_price: float
    model_price: float
    price_difference_bp: float
    convention: str | None
    market_vol: float | None
    model_vol: float | None
    vol_difference_bp: float | None
    weight: float


@dataclass(frozen=True, kw_only=True)
class InflationFitReport:
    """Result of a Jarrow-Yildirim fit to YoY cap and floor quotes.

    params: the fitted parameters (those not fitted as given). rows: one per quote, in input
    order. price_rmse_bp: root mean square (unweighted, over all quotes) of the price errors in
    basis points of notional. vol_rmse_bp: the same of ``vol_difference_bp`` over the vol quotes
    (``None`` if there are none). fitted: names of the fitted parameters. at_bound: fitted
    parameters that ended on a bound. success, status, message: those of
    ``scipy.optimize.least_squares``; n_function_evaluations and n_jacobian_evaluations count
    its work.
    """

    params: JarrowYildirimParams
    rows: tuple[YoYCapFloorFitRow, ...]
    price_rmse_bp: float
    vol_rmse_bp: float | None
    fitted: tuple[str, ...]
    at_bound: tuple[str, ...]
    success: bool
    status: int
    message: str
    n_function_evaluations: int
    n_jacobian_evaluations: int

    def as_records(self) -> list[dict[str, Any]]:
        """The rows as plain dictionaries (for tables and JSON)."""
        return [dict(vars(r)) for r in self.rows]


def _with(params: JarrowYildirimParams, names: tuple[str, ...], theta: np.ndarray) -> JarrowYildirimParams:
    values = dict(zip(names, (float(v) for v in theta), strict=True))
    real = params.real
    if "real_mean_reversion" in values or "real_volatility" in values:
        real = HullWhiteParams(
            mean_reversion=values.get("real_mean_reversion", real.mean_reversion),
            volatility=values.get("real_volatility", real.volatility),
        )
    return replace(
        params, real=real,
        inflation_volatility=values.get("inflation_volatility", params.inflation_volatility),
    )


def _getter(params: JarrowYildirimParams, name: str) -> float:
    if name == "inflation_volatility":
        return params.inflation_volatility
    if name == "real_mean_reversion":
        return params.real.mean_reversion
    return params.real.volatility


def calibrate_jarrow_yildirim(
    nominal_curve: DiscountCurve,
    real_curve: DiscountCurve,
    quotes: Sequence[YoYCapFloorQuote],
    *,
    initial: JarrowYildirimParams,
    fit: Sequence[str] = ("inflation_volatility",),
    inflation_volatility_bounds: tuple[float, float] = (1e-4, 0.5),
    real_mean_reversion_bounds: tuple[float, float] = (1e-4, 3.0),
    real_volatility_bounds: tuple[float, float] = (1e-5, 0.2),
    tolerance: float = 1e-12,
    max_evaluations: int = 500,
) -> InflationFitReport:
    """Fit Jarrow-Yildirim volatility parameters to YoY cap and floor quotes.

    initial: the nominal Hull-White parameters (from the swaption fit), the correlations (fixed)
    and the starting values of the fitted parameters (clipped into their bounds). fit: the
    parameters to fit, a subset of :data:`INFLATION_PARAMETER_NAMES`. tolerance: ``ftol = xtol =
    gtol`` of ``least_squares``. Raises :class:`pqflow.errors.CalibrationError` when the fit
    cannot start (no usable quotes, or quotes beyond the curves).
    """
    quotes = tuple(quotes)
    names = tuple(dict.fromkeys(fit))
    if not quotes:
        raise CalibrationError("no YoY cap or floor quotes to calibrate to")
    bad = [n for n in names if n not in INFLATION_PARAMETER_NAMES]
    if bad or not names:
        raise ValueError(f"fit must name some of {INFLATION_PARAMETER_NAMES}, not {tuple(fit)}")
    weights = np.array([q.weight for q in quotes])
    if not np.sum(weights) > 0.0:
        raise CalibrationError("every YoY cap or floor quote has weight 0: nothing to fit")
    bounds = {
        "inflation_volatility": inflation_volatility_bounds,
        "real_mean_reversion": real_mean_reversion_bounds,
        "real_volatility": real_volatility_bounds,
    }
    for n in names:
        lo, hi = bounds[n]
        if not 0.0 < lo < hi:
            raise ValueError(f"{n}_bounds must satisfy 0 < lower < upper")
    last = max(q.n_caplets for q in quotes)
    reach = min(nominal_curve.max_maturity, real_curve.max_maturity)
    if last > reach * (1.0 + 1e-12):
        raise CalibrationError(
            f"YoY quotes run to {last:g} years but the nominal and real curves reach {reach:g} only"
        )

    market = np.array([yoy_quote_price(nominal_curve, q) for q in quotes])
    sqrt_w = np.sqrt(weights)
    # Each cap is a sum of caplets; price each distinct (period, strike, kind) once per call.
    caplets = sorted({(i, q.strike, q.kind) for q in quotes for i in range(1, q.n_caplets + 1)})
    index = {c: j for j, c in enumerate(caplets)}
    members = [np.array([index[(i, q.strike, q.kind)] for i in range(1, q.n_caplets + 1)]) for q in quotes]

    def model_prices(params: JarrowYildirimParams) -> np.ndarray:
        values = np.array([
            yoy_caplet_price(nominal_curve, real_curve, params, start=float(i - 1), end=float(i),
                             strike=k, kind=kind)
            for i, k, kind in caplets
        ])
        return np.array([values[m].sum() for m in members])

    def residuals(theta: np.ndarray) -> np.ndarray:
        return sqrt_w * (model_prices(_with(initial, names, theta)) - market) / _BP

    lower = np.array([bounds[n][0] for n in names])
    upper = np.array([bounds[n][1] for n in names])
    x0 = np.clip(np.array([_getter(initial, n) for n in names]), lower, upper)
    result = least_squares(
        residuals, x0, bounds=(lower, upper), method="trf", x_scale=np.abs(x0),
        ftol=tolerance, xtol=tolerance, gtol=tolerance, max_nfev=max_evaluations,
    )
    params = _with(initial, names, result.x)
    prices = model_prices(params)
    rows = []
    vol_diffs = []
    for q, mp, p in zip(quotes, market, prices, strict=True):
        model_vol = vol_diff = None
        if q.vol is not None:
            model_vol = _implied_flat_vol(nominal_curve, q, float(p))
            scale = 1.0 if q.convention == "normal" else 1.0 / _BP
            vol_diff = (model_vol - q.vol) * scale
            vol_diffs.append(vol_diff)
        rows.append(YoYCapFloorFitRow(
            maturity=q.maturity, strike=q.strike, kind=q.kind, market_price=float(mp),
            model_price=float(p), price_difference_bp=float((p - mp) / _BP),
            convention=q.convention, market_vol=q.vol, model_vol=model_vol,
            vol_difference_bp=vol_diff, weight=q.weight,
        ))
    return InflationFitReport(
        params=params,
        rows=tuple(rows),
        price_rmse_bp=float(np.sqrt(np.mean(((prices - market) / _BP) ** 2))),
        vol_rmse_bp=float(np.sqrt(np.mean(np.square(vol_diffs)))) if vol_diffs else None,
        fitted=names,
        at_bound=tuple(n for n, m in zip(names, result.active_mask, strict=True) if m != 0),
        success=bool(result.success),
        status=int(result.status),
        message=str(result.message),
        n_function_evaluations=int(result.nfev),
        n_jacobian_evaluations=int(result.njev) if result.njev is not None else 0,
    )
