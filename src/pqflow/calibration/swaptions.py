"""European swaptions under Hull-White one-factor rates, and the fit of ``(a, sigma)`` to quotes.

A swaption expiring at ``T0`` on a swap of ``tenor`` years pays, in the payer case, the fixed
rate ``K`` at ``T1 < ... < Tn = T0 + tenor`` (``frequency`` payments a year, accrual fractions
``tau_i = T_i - T_{i-1}``; annual by default) against a floating leg valued at par: at ``T0``
the floating leg is worth ``1 - P(T0, Tn)`` per unit notional, so today it is worth
``P(0,T0) - P(0,Tn)``. Hence

    annuity              A = sum_i tau_i P(0, T_i),
    forward swap rate    F = (P(0, T0) - P(0, Tn)) / A        (the at-the-money strike).

Jamshidian's decomposition (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*,
2nd ed., 2006, ch. 3, section 3.11 (section number from memory)): with coupons
``c_i = K tau_i`` plus the notional at ``Tn``, a payer swaption is a put, struck at 1, on the
coupon bond ``sum c_i P(T0, T_i)``. Each ``P(T0, T_i)`` is decreasing in the factor ``x_{T0}``,
so there is one ``x*`` with ``sum c_i P(T0, T_i; x*) = 1`` (for a negative strike the coupons
before the last are negative; the coupon bond then has one sign change in its exponential sum,
so by Descartes' rule it still equals 1 at exactly one ``x*`` and is below 1 above it, which is
all the decomposition needs); with ``X_i = P(T0, T_i; x*)``,

    payer    = sum_i c_i ZBP(0, T0, T_i, X_i),     receiver = sum_i c_i ZBC(0, T0, T_i, X_i).

Calibration: each quote (a volatility in its market convention) is turned into a price with
the convention's formula on ``F`` and ``A``; ``(a, sigma)`` minimise the weighted sum of squared
errors, ``sum w_i r_i^2``, either of implied volatility in the quoted convention (the default;
``r_i`` in basis points of volatility) or of price (``r_i`` in basis points of notional), by
``scipy.optimize.least_squares`` within bounds.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
from scipy.optimize import brentq, least_squares

from pqflow.calibration.formulas import VOL_CONVENTIONS, implied_vol, option_price
from pqflow.errors import MarketDataError
from pqflow.market.curve import DiscountCurve
from pqflow.models.hull_white import HullWhiteParams, zcb_price, zero_bond_option

__all__ = [
    "SwaptionQuote",
    "SwaptionFitRow",
    "SwaptionFitReport",
    "fixed_leg_schedule",
    "swap_annuity",
    "forward_swap_rate",
    "JamshidianDecomposition",
    "jamshidian_decomposition",
    "hull_white_swaption_price",
    "swaption_quote_price",
    "calibrate_hull_white_to_swaptions",
]

_BP = 1e-4
_GRID_TOL = 1e-9


@dataclass(frozen=True, kw_only=True)
class SwaptionQuote:
    """One at-the-money European swaption quote.

    expiry: option expiry ``T0`` in years. tenor: length of the underlying swap in years (a
    whole number of fixed periods). vol: the quoted volatility in market units: basis points
    for ``convention="normal"`` (85 bp is ``85.0``), a decimal for ``"lognormal"`` and
    ``"shifted_lognormal"`` (20% is ``0.20``). shift: the displacement ``delta`` of a shifted
    lognormal quote (a decimal rate, e.g. ``0.01``); must be 0 otherwise. weight: its weight in
    the least-squares fit (not negative).
    """

    expiry: float
    tenor: float
    vol: float
    convention: str
    shift: float = 0.0
    weight: float = 1.0

    def __post_init__(self) -> None:
        where = f"swaption quote {self.expiry:g}y x {self.tenor:g}y"
        if not (np.isfinite(self.expiry) and self.expiry > 0.0):
            raise MarketDataError(f"{where}: expiry must be positive")
        if not (np.isfinite(self.tenor) and self.tenor > 0.0):
            raise MarketDataError(f"{where}: tenor must be positive")
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
        if not np.isfinite(self.shift):
            raise MarketDataError(f"{where}: shift must be finite")
        if not (np.isfinite(self.weight) and self.weight >= 0.0):
            raise MarketDataError(f"{where}: weight must not be negative")

    @property
    def vol_decimal(self) -> float:
        """The volatility as an absolute decimal (normal vols divided by 10,000)."""
        return self.vol * _BP if self.convention == "normal" else self.vol


@dataclass(frozen=True, kw_only=True)
class SwaptionFitRow:
    """The fit of one quote. Vols are in the quote's units (bp for normal, decimal otherwise);
    ``vol_difference_bp`` is model minus market in basis points of the volatility (for a
    lognormal quote one basis point is 0.01 vol points); prices per unit notional."""

    expiry: float
    tenor: float
    convention: str
    shift: float
    forward_rate: float
    annuity: float
    market_vol: float
    model_vol: float
    vol_difference_bp: float
    market_price: float
    model_price: float
    weight: float


@dataclass(frozen=True, kw_only=True)
class SwaptionFitReport:
    """Result of a Hull-White fit to swaption quotes.

    params: the fitted parameters. rows: one per quote, in input order. rmse_bp: root mean
    square (unweighted, over all quotes) of ``vol_difference_bp``. price_rmse_bp: the same of
    the price errors, in basis points of notional. objective: ``"implied_vol"`` or ``"price"``.
    fitted: names of the parameters that were fitted (``mean_reversion`` is absent when it was
    held fixed). at_bound: names of the fitted parameters that ended on a bound. success,
    status, message: those of ``scipy.optimize.least_squares``; n_function_evaluations and
    n_jacobian_evaluations count its work (one Jacobian per iteration).
    """

    params: Any  # HullWhiteParams here; G2PlusPlusParams for the G2++ fit
    rows: tuple[SwaptionFitRow, ...]
    rmse_bp: float
    price_rmse_bp: float
    objective: str
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


def fixed_leg_schedule(
    expiry: float, tenor: float, *, frequency: int = 1
) -> tuple[np.ndarray, np.ndarray]:
    """Payment times ``T_1..T_n`` and accrual fractions ``tau_1..tau_n``, shapes ``(n,)``.

    The tenor must be a whole number of periods of ``1/frequency`` years.
    """
    if not expiry > 0.0 or not tenor > 0.0:
        raise ValueError("expiry and tenor must be positive")
    if not (isinstance(frequency, (int, np.integer)) and frequency >= 1):
        raise ValueError("frequency must be a positive whole number of payments a year")
    periods = tenor * frequency
    n = int(round(periods))
    if n < 1 or abs(periods - n) > _GRID_TOL * max(1.0, periods):
        raise ValueError(
            f"tenor {tenor:g}y is not a whole number of {frequency}-a-year fixed periods"
        )
    times = expiry + np.arange(1, n + 1) / frequency
    accruals = np.diff(np.concatenate(([expiry], times)))
    return times, accruals


def swap_annuity(curve: DiscountCurve, expiry: float, tenor: float, *, frequency: int = 1) -> float:
    """``A = sum tau_i P(0, T_i)`` of the fixed leg."""
    times, accruals = fixed_leg_schedule(expiry, tenor, frequency=frequency)
    return float(np.sum(accruals * curve.discount(times)))


def forward_swap_rate(
    curve: DiscountCurve, expiry: float, tenor: float, *, frequency: int = 1
) -> float:
    """``F = (P(0, T0) - P(0, Tn)) / A``: the par rate of the forward-starting swap."""
    times, _ = fixed_leg_schedule(expiry, tenor, frequency=frequency)
    annuity = swap_annuity(curve, expiry, tenor, frequency=frequency)
    return float((curve.discount(expiry) - curve.discount(times[-1])) / annuity)


def _critical_factor(
    curve: DiscountCurve, params: HullWhiteParams, expiry: float, times: np.ndarray,
    coupons: np.ndarray,
) -> float:
    """``x*`` with ``sum c_i P(T0, T_i; x*) = 1``; the sum is decreasing in ``x``."""
    maturities = times - expiry

    def excess(x: float) -> float:
        return float(np.sum(coupons * zcb_price(curve, params, expiry, maturities, x))) - 1.0

    lo, hi = -0.05, 0.05
    for _ in range(200):
        if excess(lo) > 0.0:
            break
        lo *= 2.0
    for _ in range(200):
        if excess(hi) < 0.0:
            break
        hi *= 2.0
    if not (excess(lo) > 0.0 > excess(hi)):
        raise ValueError("Jamshidian decomposition: no critical factor level found")
    return float(brentq(excess, lo, hi, xtol=1e-15, rtol=4.0 * np.finfo(float).eps, maxiter=500))


@dataclass(frozen=True, kw_only=True)
class JamshidianDecomposition:
    """The coupon bond of a swaption and its split into zero-bond options.

    critical_factor: ``x*``, the Hull-White factor at expiry at which the coupon bond is worth
    1. payment_times, coupons, bond_strikes: ``T_i``, ``c_i`` (the last including the notional)
    and ``X_i = P(T0, T_i; x*)``, each shape ``(n,)``.
    """

    expiry: float
    strike: float
    critical_factor: float
    payment_times: np.ndarray
    coupons: np.ndarray
    bond_strikes: np.ndarray


def jamshidian_decomposition(
    curve: DiscountCurve,
    params: HullWhiteParams,
    *,
    expiry: float,
    tenor: float,
    strike: float | None = None,
    frequency: int = 1,
) -> JamshidianDecomposition:
    """Jamshidian's split of the swaption on the swap ``(expiry, tenor)`` struck at ``strike``
    (``None``: at the money). Needs ``sigma > 0`` and a final cash flow ``1 + K tau_n > 0``."""
    if not params.volatility > 0.0:
        raise ValueError("Jamshidian decomposition needs a positive Hull-White volatility")
    times, accruals = fixed_leg_schedule(expiry, tenor, frequency=frequency)
    k = forward_swap_rate(curve, expiry, tenor, frequency=frequency) if strike is None else strike
    coupons = k * accruals
    coupons[-1] += 1.0
    if not coupons[-1] > 0.0:
        raise ValueError("Jamshidian decomposition needs a final cash flow 1 + K tau_n > 0")
    x_star = _critical_factor(curve, params, expiry, times, coupons)
    strikes = zcb_price(curve, params, expiry, times - expiry, x_star)
    for arr in (times, coupons, strikes):
        arr.flags.writeable = False
    return JamshidianDecomposition(
        expiry=float(expiry), strike=float(k), critical_factor=x_star,
        payment_times=times, coupons=coupons, bond_strikes=strikes,
    )


def hull_white_swaption_price(
    curve: DiscountCurve,
    params: HullWhiteParams,
    *,
    expiry: float,
    tenor: float,
    strike: float | None = None,
    kind: Literal["payer", "receiver"] = "payer",
    frequency: int = 1,
) -> float:
    """Price per unit notional of a European swaption under Hull-White, by Jamshidian's
    decomposition; ``strike=None`` means at the money (the forward swap rate). With
    ``sigma = 0`` the price is the floored forward value of the swap."""
    if kind not in ("payer", "receiver"):
        raise ValueError(f"kind must be 'payer' or 'receiver', not {kind!r}")
    if params.volatility == 0.0:
        times, accruals = fixed_leg_schedule(expiry, tenor, frequency=frequency)
        k = strike
        if k is None:
            k = forward_swap_rate(curve, expiry, tenor, frequency=frequency)
        annuity = float(np.sum(accruals * curve.discount(times)))
        par = float(curve.discount(expiry) - curve.discount(times[-1]))
        swap = par - k * annuity
        return max(swap, 0.0) if kind == "payer" else max(-swap, 0.0)
    split = jamshidian_decomposition(
        curve, params, expiry=expiry, tenor=tenor, strike=strike, frequency=frequency
    )
    option = "put" if kind == "payer" else "call"
    return float(
        sum(
            c * zero_bond_option(
                curve, params, expiry=expiry, bond_maturity=float(t), strike=float(x), kind=option
            )
            for c, t, x in zip(split.coupons, split.payment_times, split.bond_strikes, strict=True)
        )
    )


def swaption_quote_price(
    curve: DiscountCurve, quote: SwaptionQuote, *, frequency: int = 1
) -> float:
    """Market price per unit notional of an ATM quote, from its convention's formula."""
    fwd = forward_swap_rate(curve, quote.expiry, quote.tenor, frequency=frequency)
    ann = swap_annuity(curve, quote.expiry, quote.tenor, frequency=frequency)
    _check_forward(quote, fwd)
    return float(
        option_price(
            quote.convention, fwd, fwd, quote.vol_decimal, quote.expiry,
            annuity=ann, kind="payer", shift=quote.shift,
        )
    )


def _check_forward(quote: SwaptionQuote, fwd: float) -> None:
    if quote.convention != "normal" and not fwd + quote.shift > 0.0:
        raise MarketDataError(
            f"swaption quote {quote.expiry:g}y x {quote.tenor:g}y: forward swap rate "
            f"{fwd:.6%} plus shift {quote.shift:g} is not positive, so a {quote.convention} "
            "vol is undefined; quote it as normal or with a larger shift"
        )


def _to_quote_units(quote: SwaptionQuote, vol_decimal: float) -> float:
    return vol_decimal / _BP if quote.convention == "normal" else vol_decimal


def calibrate_hull_white_to_swaptions(
    curve: DiscountCurve,
    quotes: Sequence[SwaptionQuote],
    *,
    objective: Literal["implied_vol", "price"] = "implied_vol",
    initial: HullWhiteParams | None = None,
    mean_reversion_bounds: tuple[float, float] = (1e-4, 1.0),
    volatility_bounds: tuple[float, float] = (1e-5, 0.2),
    fix_mean_reversion: float | None = None,
    frequency: int = 1,
    tolerance: float = 1e-12,
    max_evaluations: int = 500,
) -> SwaptionFitReport:
    """Fit Hull-White ``(a, sigma)`` to ATM swaption quotes by weighted least squares.

    quotes: any expiry x tenor grid (need not be complete), each in its own convention.
    objective: ``"implied_vol"`` minimises ``sum w (model vol - market vol)^2`` with vols in
    basis points of the quoted convention; ``"price"`` minimises ``sum w (model - market)^2``
    with prices in basis points of notional. initial: starting point (default ``a = 0.05``,
    ``sigma = 0.01`` clipped into the bounds). fix_mean_reversion: hold ``a`` at this value
    and fit ``sigma`` only (a common practice when ``a`` is poorly identified). tolerance:
    ``ftol = xtol = gtol`` of ``least_squares``.
    """
    quotes = tuple(quotes)
    if not quotes:
        raise MarketDataError("no swaption quotes to calibrate to")
    if objective not in ("implied_vol", "price"):
        raise ValueError(f"objective must be 'implied_vol' or 'price', not {objective!r}")
    weights = np.array([q.weight for q in quotes])
    if not np.sum(weights) > 0.0:
        raise MarketDataError("every swaption quote has weight 0: nothing to fit")
    for name, (lo, hi) in (("mean_reversion", mean_reversion_bounds),
                           ("volatility", volatility_bounds)):
        if not 0.0 < lo < hi:
            raise ValueError(f"{name}_bounds must satisfy 0 < lower < upper")
    if fix_mean_reversion is not None and not fix_mean_reversion > 0.0:
        raise ValueError("fix_mean_reversion must be positive")

    last = max(q.expiry + q.tenor for q in quotes)
    if last > curve.max_maturity * (1.0 + 1e-12):
        raise MarketDataError(
            f"swaption quotes run to {last:g} years but the curve ends at {curve.max_maturity:g}"
        )
    forwards = np.array([forward_swap_rate(curve, q.expiry, q.tenor, frequency=frequency)
                         for q in quotes])
    annuities = np.array([swap_annuity(curve, q.expiry, q.tenor, frequency=frequency)
                          for q in quotes])
    for q, f in zip(quotes, forwards, strict=True):
        _check_forward(q, float(f))
    market_vols = np.array([q.vol_decimal for q in quotes])
    market_prices = np.array([
        float(option_price(q.convention, f, f, v, q.expiry, annuity=a, kind="payer",
                           shift=q.shift))
        for q, f, a, v in zip(quotes, forwards, annuities, market_vols, strict=True)
    ])
    sqrt_w = np.sqrt(weights)

    start = initial or HullWhiteParams(mean_reversion=0.05, volatility=0.01)
    a0 = float(np.clip(start.mean_reversion, *mean_reversion_bounds))
    s0 = float(np.clip(start.volatility, *volatility_bounds))

    def unpack(theta: np.ndarray) -> HullWhiteParams:
        if fix_mean_reversion is None:
            return HullWhiteParams(mean_reversion=float(theta[0]), volatility=float(theta[1]))
        return HullWhiteParams(mean_reversion=fix_mean_reversion, volatility=float(theta[0]))

    def model_prices(params: HullWhiteParams) -> np.ndarray:
        return np.array([
            hull_white_swaption_price(curve, params, expiry=q.expiry, tenor=q.tenor,
                                      strike=float(f), kind="payer", frequency=frequency)
            for q, f in zip(quotes, forwards, strict=True)
        ])

    def model_vols(prices: np.ndarray) -> np.ndarray:
        return np.array([
            float(implied_vol(q.convention, p, f, f, q.expiry, annuity=a, kind="payer",
                              shift=q.shift))
            for q, p, f, a in zip(quotes, prices, forwards, annuities, strict=True)
        ])

    def residuals(theta: np.ndarray) -> np.ndarray:
        prices = model_prices(unpack(theta))
        if objective == "price":
            return sqrt_w * (prices - market_prices) / _BP
        return sqrt_w * (model_vols(prices) - market_vols) / _BP

    if fix_mean_reversion is None:
        x0 = np.array([a0, s0])
        lower = np.array([mean_reversion_bounds[0], volatility_bounds[0]])
        upper = np.array([mean_reversion_bounds[1], volatility_bounds[1]])
        names: tuple[str, ...] = ("mean_reversion", "volatility")
    else:
        x0 = np.array([s0])
        lower = np.array([volatility_bounds[0]])
        upper = np.array([volatility_bounds[1]])
        names = ("volatility",)

    result = least_squares(
        residuals, x0, bounds=(lower, upper), method="trf", x_scale=np.abs(x0),
        ftol=tolerance, xtol=tolerance, gtol=tolerance, max_nfev=max_evaluations,
    )
    params = unpack(result.x)
    prices = model_prices(params)
    vols = model_vols(prices)
    diff_bp = (vols - market_vols) / _BP
    rows = tuple(
        SwaptionFitRow(
            expiry=q.expiry, tenor=q.tenor, convention=q.convention, shift=q.shift,
            forward_rate=float(f), annuity=float(a),
            market_vol=q.vol, model_vol=_to_quote_units(q, float(v)),
            vol_difference_bp=float(d), market_price=float(mp), model_price=float(p),
            weight=q.weight,
        )
        for q, f, a, v, d, mp, p in zip(quotes, forwards, annuities, vols, diff_bp,
                                        market_prices, prices, strict=True)
    )
    return SwaptionFitReport(
        params=params,
        rows=rows,
        rmse_bp=float(np.sqrt(np.mean(diff_bp**2))),
        price_rmse_bp=float(np.sqrt(np.mean(((prices - market_prices) / _BP) ** 2))),
        objective=objective,
        fitted=names,
        at_bound=tuple(n for n, m in zip(names, result.active_mask, strict=True) if m != 0),
        success=bool(result.success),
        status=int(result.status),
        message=str(result.message),
        n_function_evaluations=int(result.nfev),
        n_jacobian_evaluations=int(result.njev) if result.njev is not None else 0,
    )
