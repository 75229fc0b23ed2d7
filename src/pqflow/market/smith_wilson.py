"""Smith-Wilson extrapolation of the risk-free curve to an ultimate forward rate (UFR).

The method as EIOPA documents it (*Technical documentation of the methodology to derive EIOPA's
risk-free interest rate term structures*, Smith-Wilson chapter). With ``omega = ln(1 + UFR)``
(the ultimate forward *intensity*):

    P(t) = e^{-omega t} + sum_j zeta_j W(t, u_j),
    W(t, u) = e^{-omega (t + u)} [alpha min(t,u)
                - 1/2 e^{-alpha max(t,u)} (e^{alpha min(t,u)} - e^{-alpha min(t,u)})].

Calibration instruments ``i`` with market values ``m_i`` pay ``c_ij`` at the dates ``u_j``
(cash-flow matrix ``C``, shape ``(n_instruments, n_dates)``). With ``mu_j = e^{-omega u_j}`` the
instruments are repriced exactly when

    (C W C^T) eta = m - C mu,      zeta = C^T eta      (one weight per cash-flow date).

Zero-coupon inputs: ``C = I`` and ``m_j = (1 + r_j)^{-u_j}`` (annual compounding, as the
regulator publishes). Par swaps with an annual fixed leg: row ``i`` pays ``s_i`` at years
``1 .. n_i - 1`` and ``1 + s_i`` at ``n_i``; ``m_i = 1``. A credit-risk adjustment (Delegated
Regulation (EU) 2015/35, Art. 45) in basis points is deducted from the input rates first.

Beyond the last cash-flow date ``P(t) = e^{-omega t} (A - B e^{-alpha t})``, so the forward
intensity ``f(t) = -d ln P / dt = omega + alpha / (1 - kappa e^{alpha t})`` with
``kappa = A / B`` tends to ``omega``. The convergence speed ``alpha`` is the smallest value not
below ``alpha_min = 0.05`` for which ``|f(T) - omega| <= 1 bp`` at the convergence point
``T = max(LLP + 40, 60)``. The search scans ``alpha`` upwards on a coarse grid until the
criterion first holds, then bisects the last step to ``alpha_precision``; the ``alpha`` returned
is the upper end of the final bracket, so the criterion holds exactly at the reported value.
(Should the gap be non-monotone within one scan step, a smaller passing ``alpha`` inside that
step could be missed; the scan step, 0.01 by default, bounds that.) The regulator publishes
``alpha`` to six decimals; rounding the reported value up to six decimals reproduces it.

The extrapolation method is pluggable: :data:`EXTRAPOLATION_METHODS` maps a method name to a
callable following :class:`ExtrapolationMethod` (this module registers ``"smith_wilson"``);
:func:`extrapolate_curve` dispatches on the name.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from types import MappingProxyType
from typing import Any, Protocol

import numpy as np

from pqflow.errors import MarketDataError
from pqflow.market.curve import DiscountCurve

__all__ = [
    "CurveInstruments",
    "zero_coupon_instruments",
    "par_swap_instruments",
    "wilson_function",
    "SmithWilsonCurve",
    "SmithWilsonReport",
    "fit_smith_wilson",
    "convergence_point",
    "ExtrapolationMethod",
    "EXTRAPOLATION_METHODS",
    "register_extrapolation_method",
    "extrapolate_curve",
]

BASIS_POINT = 1e-4
_WHOLE_YEAR_TOL = 1e-9


# --------------------------------------------------------------------------------------------
# Calibration instruments
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class CurveInstruments:
    """Instruments a curve must reprice: cash flows at dates, and their market values.

    cash_flow_times: the dates ``u_j`` in years, positive and strictly increasing, ``(n_dates,)``.
    cash_flows: ``c_ij``, the amount instrument ``i`` pays at ``u_j``, ``(n_instruments, n_dates)``.
    market_values: ``m_i`` per unit notional, ``(n_instruments,)``.
    last_liquid_point: the longest maturity among the instruments (years).
    kind: ``"zero_rate"`` or ``"par_swap"`` (what the rates were), for the report.
    credit_risk_adjustment_bp: the adjustment already deducted from the input rates.
    """

    cash_flow_times: np.ndarray
    cash_flows: np.ndarray
    market_values: np.ndarray
    last_liquid_point: float
    kind: str
    credit_risk_adjustment_bp: float = 0.0

    def __post_init__(self) -> None:
        u = np.asarray(self.cash_flow_times, dtype=float)
        c = np.asarray(self.cash_flows, dtype=float)
        m = np.asarray(self.market_values, dtype=float)
        if u.ndim != 1 or u.size == 0:
            raise ValueError("cash_flow_times must be a non-empty 1-d array")
        if c.ndim != 2 or c.shape[1] != u.size or m.shape != (c.shape[0],) or c.shape[0] == 0:
            raise ValueError(
                "cash_flows must have shape (n_instruments, n_dates) matching market_values "
                f"(n_instruments,) and cash_flow_times (n_dates,); got {c.shape}, {m.shape}, "
                f"{u.shape}"
            )
        if not (np.all(np.isfinite(u)) and np.all(np.isfinite(c)) and np.all(np.isfinite(m))):
            raise ValueError("instrument cash flows, dates and market values must be finite")
        if u[0] <= 0.0 or np.any(np.diff(u) <= 0.0):
            raise ValueError("cash-flow dates must be positive and strictly increasing")
        object.__setattr__(self, "cash_flow_times", u)
        object.__setattr__(self, "cash_flows", c)
        object.__setattr__(self, "market_values", m)
        object.__setattr__(self, "last_liquid_point", float(self.last_liquid_point))


def _check_rates(
    maturities: np.ndarray, rates: np.ndarray, what: str
) -> tuple[np.ndarray, np.ndarray]:
    t = np.asarray(maturities, dtype=float)
    r = np.asarray(rates, dtype=float)
    if t.ndim != 1 or t.shape != r.shape or t.size == 0:
        raise MarketDataError(f"{what}: maturities and rates must be 1-d arrays of one length")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(r))):
        raise MarketDataError(f"{what}: maturities and rates must be finite numbers")
    if t[0] <= 0.0 or np.any(np.diff(t) <= 0.0):
        bad = 0 if t[0] <= 0.0 else int(np.argmax(np.diff(t) <= 0.0)) + 1
        raise MarketDataError(
            f"{what}: maturities must be positive and strictly increasing "
            f"(position {bad + 1}, maturity {t[bad]:g})"
        )
    return t, r


def zero_coupon_instruments(
    maturities: np.ndarray, zero_rates: np.ndarray, *, credit_risk_adjustment_bp: float = 0.0
) -> CurveInstruments:
    """Zero-coupon bonds from annually compounded zero rates ``(n,)`` at maturities ``(n,)``.

    The market value of bond ``j`` is ``(1 + r_j - CRA)^{-u_j}``; the cash-flow matrix is ``I``.
    """
    t, r = _check_rates(maturities, zero_rates, "zero rates")
    r = r - credit_risk_adjustment_bp * BASIS_POINT
    if np.any(r <= -1.0):
        raise MarketDataError("annually compounded zero rates must exceed -100%")
    return CurveInstruments(
        cash_flow_times=t,
        cash_flows=np.eye(t.size),
        market_values=(1.0 + r) ** (-t),
        last_liquid_point=float(t[-1]),
        kind="zero_rate",
        credit_risk_adjustment_bp=float(credit_risk_adjustment_bp),
    )


def par_swap_instruments(
    maturities: np.ndarray, par_rates: np.ndarray, *, credit_risk_adjustment_bp: float = 0.0
) -> CurveInstruments:
    """Par swaps with an annual fixed leg, valued as par bonds (market value 1).

    maturities: whole years, strictly increasing, ``(n,)``; par_rates: decimals, ``(n,)``.
    Cash-flow dates are the years ``1 .. max(maturities)``; row ``i`` pays the (adjusted) par
    rate each year and the notional with the last coupon.
    """
    t, s = _check_rates(maturities, par_rates, "par swap rates")
    years = np.rint(t)
    off = np.abs(t - years) > _WHOLE_YEAR_TOL
    if np.any(off) or years[0] < 1:
        bad = int(np.argmax(off)) if np.any(off) else 0
        raise MarketDataError(
            f"par swap rates: an annual fixed leg needs whole-year maturities; position "
            f"{bad + 1} has maturity {t[bad]:g}"
        )
    s = s - credit_risk_adjustment_bp * BASIS_POINT
    n_dates = int(years[-1])
    u = np.arange(1, n_dates + 1, dtype=float)
    c = np.zeros((t.size, n_dates))
    for i, (n, rate) in enumerate(zip(years.astype(int), s, strict=True)):
        c[i, :n] = rate
        c[i, n - 1] += 1.0
    return CurveInstruments(
        cash_flow_times=u,
        cash_flows=c,
        market_values=np.ones(t.size),
        last_liquid_point=float(years[-1]),
        kind="par_swap",
        credit_risk_adjustment_bp=float(credit_risk_adjustment_bp),
    )


# --------------------------------------------------------------------------------------------
# The Wilson kernel and the curve
# --------------------------------------------------------------------------------------------


def _heart(t: np.ndarray, u: np.ndarray, alpha: float) -> np.ndarray:
    """``alpha min - 1/2 e^{-alpha max}(e^{alpha min} - e^{-alpha min})``, without overflow."""
    lo = np.minimum(t, u)
    hi = np.maximum(t, u)
    return alpha * lo - 0.5 * (np.exp(-alpha * (hi - lo)) - np.exp(-alpha * (hi + lo)))


def _heart_dt(t: np.ndarray, u: np.ndarray, alpha: float) -> np.ndarray:
    """``d/dt`` of :func:`_heart` (continuous at ``t = u``)."""
    near = np.exp(-alpha * np.abs(t - u))
    far = np.exp(-alpha * (t + u))
    return np.where(t <= u, alpha - 0.5 * alpha * (near + far), 0.5 * alpha * (near - far))


def wilson_function(
    t: np.ndarray | float, u: np.ndarray | float, *, omega: float, alpha: float
) -> np.ndarray:
    """``W(t_k, u_j)`` for ``t`` of shape ``(k,)`` and ``u`` of shape ``(n,)``; result ``(k, n)``.

    ``u`` may be the kernel nodes or any dates; ``W`` is symmetric in its two arguments.
    """
    t = np.atleast_1d(np.asarray(t, dtype=float))[:, None]
    u = np.atleast_1d(np.asarray(u, dtype=float))[None, :]
    return np.exp(-omega * (t + u)) * _heart(t, u, alpha)


@dataclass(frozen=True, kw_only=True)
class SmithWilsonCurve:
    """A fitted Smith-Wilson discount curve; same interface as ``LogDiscountCurve``.

    ultimate_forward_rate: UFR, annually compounded (``omega = ln(1 + UFR)``).
    alpha: convergence speed (per year, > 0).
    nodes: the kernel dates ``u_j`` in years, ``(n,)``.
    weights: ``zeta_j``, one per node, ``(n,)``.
    long_end: the longest maturity the curve answers for (years, default 150); asking beyond it
        is an error, as for the interpolated curve.
    """

    ultimate_forward_rate: float
    alpha: float
    nodes: np.ndarray
    weights: np.ndarray
    long_end: float = 150.0

    def __post_init__(self) -> None:
        u = np.asarray(self.nodes, dtype=float)
        z = np.asarray(self.weights, dtype=float)
        if u.ndim != 1 or u.shape != z.shape or u.size == 0:
            raise ValueError("nodes and weights must be 1-d arrays of one length")
        if not (self.alpha > 0.0 and np.isfinite(self.alpha)):
            raise ValueError("Smith-Wilson alpha must be a positive number")
        if not self.ultimate_forward_rate > -1.0:
            raise ValueError("the ultimate forward rate must exceed -100%")
        if not self.long_end >= u[-1]:
            raise ValueError(
                f"long_end {self.long_end:g} must not be shorter than the last node {u[-1]:g}"
            )
        object.__setattr__(self, "nodes", u)
        object.__setattr__(self, "weights", z)

    @property
    def omega(self) -> float:
        """Ultimate forward intensity ``ln(1 + UFR)``."""
        return float(np.log1p(self.ultimate_forward_rate))

    @property
    def max_maturity(self) -> float:
        return float(self.long_end)

    def _grid(self, t: np.ndarray | float) -> tuple[np.ndarray, np.ndarray]:
        t = np.asarray(t, dtype=float)
        if np.any(~np.isfinite(t)) or np.any(t < 0.0) or np.any(t > self.long_end * (1.0 + 1e-12)):
            raise ValueError(
                f"curve asked at t in [{np.min(t):g}, {np.max(t):g}] but it is defined on "
                f"[0, {self.long_end:g}] years only"
            )
        return t, t.reshape(-1)[:, None]

    def _price_and_slope(
        self, t: np.ndarray | float
    ) -> tuple[np.ndarray, np.ndarray, tuple[int, ...]]:
        t, col = self._grid(t)
        w, a, u = self.omega, self.alpha, self.nodes[None, :]
        decay = np.exp(-w * (col + u))
        heart = _heart(col, u, a)
        price = np.exp(-w * col[:, 0]) + (decay * heart) @ self.weights
        slope = (
            -w * np.exp(-w * col[:, 0])
            + (decay * (_heart_dt(col, u, a) - w * heart)) @ self.weights
        )
        return price, slope, t.shape

    def discount(self, t: np.ndarray | float) -> np.ndarray:
        """``P(0, t)``, any shape of ``t``."""
        price, _, shape = self._price_and_slope(t)
        return price.reshape(shape)

    def forward(self, t: np.ndarray | float) -> np.ndarray:
        """Instantaneous forward intensity ``-P'(t)/P(t)`` (differentiated analytically)."""
        price, slope, shape = self._price_and_slope(t)
        return (-slope / price).reshape(shape)

    def zero_rate(self, t: np.ndarray | float) -> np.ndarray:
        """Continuously compounded zero rate; at ``t = 0`` the short end ``f(0, 0)``."""
        price, slope, shape = self._price_and_slope(t)
        tt = np.asarray(t, dtype=float).reshape(-1)
        safe = np.where(tt > 0.0, tt, 1.0)
        return np.where(tt > 0.0, -np.log(price) / safe, -slope / price).reshape(shape)

    def annual_zero_rate(self, t: np.ndarray | float) -> np.ndarray:
        """Annually compounded zero rate ``P^{-1/t} - 1`` (the regulator's convention), t > 0."""
        tt = np.asarray(t, dtype=float)
        if np.any(tt <= 0.0):
            raise ValueError("annually compounded zero rates need t > 0")
        return np.expm1(self.zero_rate(tt))


# --------------------------------------------------------------------------------------------
# Fitting
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class SmithWilsonReport:
    """How a Smith-Wilson fit went.

    alpha: the convergence speed used; alpha_searched: ``False`` when it was given.
    convergence_point: ``T`` in years; forward_at_convergence: the forward intensity ``f(T)``.
    omega: ``ln(1 + UFR)``; gap_bp: ``(f(T) - omega)`` in basis points; tolerance_bp: ``tau``.
    ufr: the UFR (annually compounded); llp: last liquid point (years).
    credit_risk_adjustment_bp: deducted from the input rates before fitting.
    max_repricing_error: ``max_i |sum_j c_ij P(u_j) - m_i|`` over the inputs (per unit notional).
    input_kind: ``"zero_rate"`` or ``"par_swap"``; n_instruments: how many inputs.
    """

    method: str = "smith_wilson"
    alpha: float
    alpha_searched: bool
    alpha_min: float
    convergence_point: float
    forward_at_convergence: float
    omega: float
    gap_bp: float
    tolerance_bp: float
    ufr: float
    llp: float
    credit_risk_adjustment_bp: float
    max_repricing_error: float
    input_kind: str
    n_instruments: int

    @property
    def converged(self) -> bool:
        """Whether ``|f(T) - omega|`` is within the tolerance."""
        return abs(self.gap_bp) <= self.tolerance_bp


def convergence_point(last_liquid_point: float) -> float:
    """``T = max(LLP + 40, 60)`` years (EIOPA's rule)."""
    return float(max(last_liquid_point + 40.0, 60.0))


def _solve(
    instruments: CurveInstruments, ufr: float, alpha: float, long_end: float
) -> SmithWilsonCurve:
    omega = float(np.log1p(ufr))
    u, c, m = instruments.cash_flow_times, instruments.cash_flows, instruments.market_values
    kernel = wilson_function(u, u, omega=omega, alpha=alpha)
    lhs = c @ kernel @ c.T
    rhs = m - c @ np.exp(-omega * u)
    try:
        eta = np.linalg.solve(lhs, rhs)
    except np.linalg.LinAlgError as exc:  # duplicated instruments make C W C^T singular
        raise MarketDataError(
            "the Smith-Wilson system is singular: two instruments carry the same information"
        ) from exc
    return SmithWilsonCurve(
        ultimate_forward_rate=float(ufr),
        alpha=float(alpha),
        nodes=u,
        weights=c.T @ eta,
        long_end=long_end,
    )


def _gap(
    instruments: CurveInstruments, ufr: float, alpha: float, t_conv: float, long_end: float
) -> float:
    curve = _solve(instruments, ufr, alpha, max(long_end, t_conv))
    return float(curve.forward(t_conv)) - curve.omega


def _search_alpha(
    instruments: CurveInstruments,
    *,
    ufr: float,
    t_conv: float,
    tolerance: float,
    alpha_min: float,
    alpha_step: float,
    alpha_max: float,
    alpha_precision: float,
    long_end: float,
) -> float:
    def ok(a: float) -> bool:
        return abs(_gap(instruments, ufr, a, t_conv, long_end)) <= tolerance

    if ok(alpha_min):
        return alpha_min
    lo = alpha_min
    hi = alpha_min + alpha_step
    while not ok(hi):
        lo = hi
        hi = hi + alpha_step
        if hi > alpha_max:
            raise MarketDataError(
                f"no Smith-Wilson alpha in [{alpha_min:g}, {alpha_max:g}] brings the forward "
                f"intensity at T = {t_conv:g} years within {tolerance / BASIS_POINT:g} bp of "
                "ln(1 + UFR); check the inputs"
            )
    while hi - lo > alpha_precision:  # invariant: lo fails, hi passes
        mid = 0.5 * (lo + hi)
        if ok(mid):
            hi = mid
        else:
            lo = mid
    return hi


def fit_smith_wilson(
    instruments: CurveInstruments,
    *,
    ufr: float,
    alpha: float | None = None,
    alpha_min: float = 0.05,
    tolerance_bp: float = 1.0,
    convergence_point_years: float | None = None,
    alpha_step: float = 0.01,
    alpha_max: float = 5.0,
    alpha_precision: float = 1e-9,
    long_end: float = 150.0,
) -> tuple[SmithWilsonCurve, SmithWilsonReport]:
    """Fit a Smith-Wilson curve that reprices ``instruments`` exactly and converges to ``ufr``.

    ufr: ultimate forward rate, annually compounded (decimal, e.g. ``0.0345``). Read the current
        value from the regulator's publication; it is not built in.
    alpha: a fixed convergence speed; ``None`` (default) searches for the smallest
        ``alpha >= alpha_min`` with ``|f(T) - omega| <= tolerance_bp``.
    convergence_point_years: ``T``; default ``max(LLP + 40, 60)``.
    alpha_step, alpha_max, alpha_precision: the upward scan step, its limit and the final
        bisection width of the search.
    long_end: the longest maturity the returned curve answers for.

    Returns the curve and a :class:`SmithWilsonReport`.
    """
    if not ufr > -1.0:
        raise ValueError("the ultimate forward rate must exceed -100%")
    if not alpha_min > 0.0:
        raise ValueError("alpha_min must be positive")
    llp = instruments.last_liquid_point
    t_conv = (
        convergence_point(llp)
        if convergence_point_years is None
        else float(convergence_point_years)
    )
    if not t_conv > llp:
        raise ValueError(
            f"the convergence point {t_conv:g} must lie beyond the last liquid point {llp:g}"
        )
    if long_end < instruments.cash_flow_times[-1]:
        raise ValueError(f"long_end {long_end:g} is shorter than the last input date")
    tolerance = tolerance_bp * BASIS_POINT
    searched = alpha is None
    if alpha is None:
        alpha = _search_alpha(
            instruments,
            ufr=ufr,
            t_conv=t_conv,
            tolerance=tolerance,
            alpha_min=alpha_min,
            alpha_step=alpha_step,
            alpha_max=alpha_max,
            alpha_precision=alpha_precision,
            long_end=long_end,
        )
    elif not alpha > 0.0:
        raise ValueError("alpha must be positive")
    curve = _solve(instruments, ufr, alpha, long_end)
    # The convergence point may lie beyond the curve's long end; evaluate it on a longer twin.
    probe = curve if t_conv <= long_end else _solve(instruments, ufr, alpha, t_conv)
    f_conv = float(probe.forward(t_conv))
    model_values = instruments.cash_flows @ curve.discount(instruments.cash_flow_times)
    report = SmithWilsonReport(
        alpha=float(alpha),
        alpha_searched=searched,
        alpha_min=float(alpha_min),
        convergence_point=t_conv,
        forward_at_convergence=f_conv,
        omega=curve.omega,
        gap_bp=(f_conv - curve.omega) / BASIS_POINT,
        tolerance_bp=float(tolerance_bp),
        ufr=float(ufr),
        llp=llp,
        credit_risk_adjustment_bp=instruments.credit_risk_adjustment_bp,
        max_repricing_error=float(np.max(np.abs(model_values - instruments.market_values))),
        input_kind=instruments.kind,
        n_instruments=int(instruments.market_values.size),
    )
    return curve, report


# --------------------------------------------------------------------------------------------
# Pluggable extrapolation methods
# --------------------------------------------------------------------------------------------


class ExtrapolationMethod(Protocol):
    """An extrapolation method: instruments and a UFR in, a curve and a fit report out.

    Method-specific settings (for Smith-Wilson: ``alpha``, ``tolerance_bp``, ...) come as
    keyword options; the report is the method's own frozen dataclass.
    """

    def __call__(
        self, instruments: CurveInstruments, *, ufr: float, **options: Any
    ) -> tuple[DiscountCurve, Any]: ...


_FitFunction = Callable[..., tuple[DiscountCurve, Any]]
_METHODS: dict[str, _FitFunction] = {"smith_wilson": fit_smith_wilson}

EXTRAPOLATION_METHODS: Mapping[str, _FitFunction] = MappingProxyType(_METHODS)
"""Read-only view of the registered methods (each an :class:`ExtrapolationMethod`), by name."""


def register_extrapolation_method(name: str, method: ExtrapolationMethod | _FitFunction) -> None:
    """Register ``method`` under ``name``; an existing name is an error (no silent replacement)."""
    if not name or not isinstance(name, str):
        raise ValueError("an extrapolation method needs a non-empty name")
    if name in _METHODS:
        raise ValueError(f"extrapolation method {name!r} is already registered")
    _METHODS[name] = method


def extrapolate_curve(
    instruments: CurveInstruments, *, ufr: float, method: str = "smith_wilson", **options: Any
) -> tuple[DiscountCurve, Any]:
    """Fit and extrapolate with the method registered as ``method``."""
    try:
        fit = _METHODS[method]
    except KeyError:
        known = ", ".join(sorted(_METHODS))
        raise ValueError(f"unknown extrapolation method {method!r}; known: {known}") from None
    return fit(instruments, ufr=ufr, **options)
