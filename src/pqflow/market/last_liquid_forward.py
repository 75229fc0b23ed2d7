"""The Solvency II review's extrapolation of the risk-free curve from the last liquid forward rate.

The method the European insurance regulator documents for the basic risk-free curve from 2027
(*RFR Technical Documentation*, EIOPA-BoS-26/198, May 2026, section 8; Directive (EU) 2025/2 and
Delegated Regulation (EU) 2026/269), in four steps. ``L(t) = -ln P(0, t)`` is the log discount,
every rate below continuously compounded unless a name says otherwise.

1. **Inputs** at the deep, liquid and transparent (liquid) maturities ``t_1 < ... < t_n``: par swap
   rates with a coupon frequency ``m`` (the credit risk adjustment, CRA, deducted from each rate)
   or annually compounded government zero rates (CRA deducted, then ``z_k = ln(1 + r_k - CRA)``).
   Each liquid maturity carries an LLFR weight ``w_k`` (zero for most).
2. **Constant forwards between liquid maturities.** The instantaneous forward is constant on each
   interval ``(t_{k-1}, t_k]`` (and on ``(0, t_1]``): for swaps the one unknown forward of each
   interval is solved so that the swap maturing at ``t_k`` prices at par,
   ``(s_k - CRA)/m sum_{j=1}^{m t_k} P(j/m) + P(t_k) = 1`` (a constant continuous forward is a
   constant periodic forward); for zero rates ``L(t_k) = t_k z_k`` and ``L`` is linear between.
   Before the first liquid maturity this holds the first zero rate (or the first swap's periodic
   coupon) flat.
3. **First smoothing point and LLFR.** The first smoothing point ``t_F`` is the first liquid
   maturity with a positive weight. With ``f(a, b) = (L(b) - L(a)) / (b - a)``,

       LLFR = w_F f(t_F - 1, t_F) + sum_{k > F} w_k f(t_F, t_k),

   the one-year forward into the FSP and the forwards from the FSP to each later liquid maturity
   (on the bootstrapped curve, which the rates beyond the FSP enter through this average only).
   The weights sum to 1.
4. **Extrapolation beyond the FSP**, ``omega = ln(1 + UFR)``, ``h = t - t_F``:

       f(t_F, t_F + h) = omega + (LLFR - omega) (1 - e^{-alpha h}) / (alpha h),
       z(t_F + h) = (t_F z(t_F) + h f(t_F, t_F + h)) / (t_F + h),

   i.e. ``L(t_F + h) = L(t_F) + omega h + (LLFR - omega)(1 - e^{-alpha h}) / alpha``, whose
   instantaneous forward is ``omega + (LLFR - omega) e^{-alpha h}``: it starts at the LLFR and
   tends to ``omega``. The regulator publishes ``z`` annually compounded at whole maturities to
   150 years, rounded to 5 decimals.

The convergence parameter ``alpha`` is 11% for every currency but the Swedish krona (40%);
undertakings using the phasing-in of Article 77a(2) of the Directive take the value of its year
from :data:`PHASE_IN_ALPHA` (Table 4 of the technical documentation).

:func:`fit_last_liquid_forward` is registered as the extrapolation method
``"last_liquid_forward"`` beside Smith-Wilson (:func:`pqflow.market.smith_wilson.extrapolate_curve`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from pqflow.errors import MarketDataError
from pqflow.market.smith_wilson import (
    BASIS_POINT,
    EXTRAPOLATION_METHODS,
    CurveInstruments,
    register_extrapolation_method,
)

__all__ = [
    "METHOD_NAME",
    "DEFAULT_ALPHA",
    "KRONA_ALPHA",
    "PHASE_IN_ALPHA",
    "convergence_alpha",
    "periodic_par_swap_instruments",
    "bootstrap_constant_forward",
    "check_llfr_weights",
    "last_liquid_forward_rate",
    "LastLiquidForwardCurve",
    "LastLiquidForwardReport",
    "fit_last_liquid_forward",
]

METHOD_NAME = "last_liquid_forward"
DEFAULT_ALPHA = 0.11
KRONA_ALPHA = 0.40
KRONA = "SEK"

#: Convergence parameter under the phasing-in mechanism, by year: ``(all other currencies,
#: Swedish krona)``. Table 4 of EIOPA-BoS-26/198 (from 2032 on the final values apply).
PHASE_IN_ALPHA: dict[int, tuple[float, float]] = {
    2027: (0.200, 0.70),
    2028: (0.182, 0.64),
    2029: (0.164, 0.58),
    2030: (0.146, 0.52),
    2031: (0.128, 0.46),
    2032: (0.110, 0.40),
}

_TIME_TOL = 1e-9
_WEIGHT_SUM_TOL = 1e-9
_PAR_TOL = 1e-13


def convergence_alpha(
    *, alpha: float | None = None, phase_in_year: int | None = None, currency: str | None = None
) -> tuple[float, str]:
    """The convergence parameter and how it was chosen.

    ``alpha`` given: used as it is. ``phase_in_year``: the phasing-in table's value for the year
    (the final value from 2032 on; before 2027 there is none). Neither: 11%, or 40% for the
    Swedish krona (``currency = "SEK"``). Giving both is an error.
    """
    krona = currency is not None and currency.upper() == KRONA
    if alpha is not None and phase_in_year is not None:
        raise ValueError("give the convergence parameter alpha or a phase_in_year, not both")
    if alpha is not None:
        if not (alpha > 0.0 and np.isfinite(alpha)):
            raise ValueError(f"the convergence parameter alpha must be positive, got {alpha!r}")
        return float(alpha), "given"
    if phase_in_year is not None:
        first = min(PHASE_IN_ALPHA)
        if phase_in_year < first:
            raise ValueError(f"the phasing-in table starts in {first}; phase_in_year {phase_in_year} is earlier")
        year = min(int(phase_in_year), max(PHASE_IN_ALPHA))
        value = PHASE_IN_ALPHA[year][1 if krona else 0]
        return value, f"phasing-in, {phase_in_year}" + (" (Swedish krona)" if krona else "")
    return (KRONA_ALPHA, "Swedish krona") if krona else (DEFAULT_ALPHA, "all currencies but the Swedish krona")


# --------------------------------------------------------------------------------------------
# Inputs
# --------------------------------------------------------------------------------------------


def periodic_par_swap_instruments(
    maturities: np.ndarray,
    par_rates: np.ndarray,
    *,
    coupon_frequency: int = 1,
    credit_risk_adjustment_bp: float = 0.0,
) -> CurveInstruments:
    """Par swaps whose fixed leg pays ``coupon_frequency`` times a year, valued as par bonds.

    maturities: years, strictly increasing, each a whole number of coupon periods, ``(n,)``;
    par_rates: decimals, ``(n,)``. Cash-flow dates are ``j / m`` up to the longest maturity; row
    ``i`` pays ``(s_i - CRA) / m`` each period and the notional with the last coupon. With
    ``m = 1`` this is :func:`pqflow.market.smith_wilson.par_swap_instruments`.
    """
    m = int(coupon_frequency)
    if m < 1 or m != coupon_frequency:
        raise MarketDataError(f"the coupon frequency must be a whole number of payments a year, got "
                              f"{coupon_frequency!r}")
    t = np.asarray(maturities, dtype=float)
    s = np.asarray(par_rates, dtype=float)
    if t.ndim != 1 or t.shape != s.shape or t.size == 0:
        raise MarketDataError("par swap rates: maturities and rates must be 1-d arrays of one length")
    if not (np.all(np.isfinite(t)) and np.all(np.isfinite(s))):
        raise MarketDataError("par swap rates: maturities and rates must be finite numbers")
    periods = np.rint(t * m)
    for i in range(t.size):
        if periods[i] < 1 or abs(t[i] * m - periods[i]) > _TIME_TOL * m:
            raise MarketDataError(
                f"par swap rates: maturity {t[i]:g} (position {i + 1}) is not a whole number of coupon "
                f"periods of a fixed leg paying {m} times a year"
            )
        if i and periods[i] <= periods[i - 1]:
            raise MarketDataError(f"par swap rates: maturities must be strictly increasing (position {i + 1}, maturity "
                                  f"{t[i]:g})")
    coupons = (s - credit_risk_adjustment_bp * BASIS_POINT) / m
    n_dates = int(periods[-1])
    u = np.arange(1, n_dates + 1, dtype=float) / m
    c = np.zeros((t.size, n_dates))
    for i, (n, cpn) in enumerate(zip(periods.astype(int), coupons, strict=True)):
        c[i, :n] = cpn
        c[i, n - 1] += 1.0
    return CurveInstruments(
        cash_flow_times=u,
        cash_flows=c,
        market_values=np.ones(t.size),
        last_liquid_point=float(periods[-1] / m),
        kind="par_swap",
        credit_risk_adjustment_bp=float(credit_risk_adjustment_bp),
    )


def _instrument_maturities(instruments: CurveInstruments) -> np.ndarray:
    """The last date each instrument pays something, ``(n_instruments,)``."""
    c, u = instruments.cash_flows, instruments.cash_flow_times
    paid = np.abs(c) > 0.0
    if not np.all(paid.any(axis=1)):
        raise MarketDataError("an instrument pays nothing")
    last = c.shape[1] - 1 - np.argmax(paid[:, ::-1], axis=1)
    return u[last]


# --------------------------------------------------------------------------------------------
# Bootstrapping with constant forwards
# --------------------------------------------------------------------------------------------


def _log_discount(nodes: np.ndarray, values: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``L(t)``, linear between the nodes (``nodes[0] = 0``, ``values[0] = 0``); t within them."""
    return np.interp(t, nodes, values)


def bootstrap_constant_forward(instruments: CurveInstruments) -> tuple[np.ndarray, np.ndarray]:
    """Log discounts ``L(t_k)`` at the instruments' maturities, with a constant forward on each
    interval between consecutive maturities so that every instrument reprices exactly.

    Returns ``(maturities, log_discounts)``, each ``(n_instruments,)``. Instruments must mature
    in strictly increasing order. Zero-coupon instruments give ``L(t_k) = -ln m_k`` exactly; for
    coupon instruments the interval's forward is found by Newton's method on the price (which
    falls as the forward rises) to a repricing error below ``1e-13``.
    """
    t = _instrument_maturities(instruments)
    if np.any(np.diff(t) <= _TIME_TOL):
        k = int(np.argmax(np.diff(t) <= _TIME_TOL)) + 1
        raise MarketDataError(
            f"instruments must mature in strictly increasing order; instrument {k + 1} matures at {t[k]:g} "
            f"after instrument {k} at {t[k - 1]:g}"
        )
    u, c, m = instruments.cash_flow_times, instruments.cash_flows, instruments.market_values
    nodes, values = [0.0], [0.0]
    phi = 0.0
    for k in range(t.size):
        t_prev, l_prev, t_k = nodes[-1], values[-1], float(t[k])
        row = c[k]
        known = (u <= t_prev + _TIME_TOL) & (row != 0.0)
        inside = (u > t_prev + _TIME_TOL) & (u <= t_k + _TIME_TOL) & (row != 0.0)
        a = float(row[known] @ np.exp(-_log_discount(np.array(nodes), np.array(values), u[known])))
        flows, tau = row[inside], u[inside] - t_prev
        target = float(m[k]) - a
        if flows.size == 1:
            if not target / flows[0] > 0.0:
                raise MarketDataError(
                    f"instrument {k + 1} (maturity {t_k:g}): no positive discount factor reprices it"
                )
            phi = (-np.log(target / flows[0]) - l_prev) / tau[0]
        else:
            for _ in range(200):
                disc = np.exp(-(l_prev + phi * tau))
                price = float(flows @ disc)
                slope = -float((flows * tau) @ disc)
                if slope >= 0.0:
                    raise MarketDataError(
                        f"instrument {k + 1} (maturity {t_k:g}): its price does not fall as rates rise; cannot "
                        f"bootstrap it"
                    )
                step = (price - target) / slope
                phi -= step
                if abs(step) < 1e-16:
                    break
            disc = np.exp(-(l_prev + phi * tau))
            if not abs(float(flows @ disc) - target) <= _PAR_TOL:
                raise MarketDataError(f"instrument {k + 1} (maturity {t_k:g}): the bootstrap did not reprice it")
        nodes.append(t_k)
        values.append(l_prev + phi * (t_k - t_prev))
    return np.array(nodes[1:]), np.array(values[1:])


# --------------------------------------------------------------------------------------------
# The last liquid forward rate
# --------------------------------------------------------------------------------------------


def check_llfr_weights(maturities: np.ndarray, weights: np.ndarray, *, where: str = "LLFR weights") -> int:
    """Check the weights (``(n,)``, one per liquid maturity) and return the index of the FSP.

    Refused: a negative or non-finite weight, no positive weight, weights not summing to 1
    (within ``1e-9``), and a first smoothing point shorter than one year (the one-year forward
    into it would start before today).
    """
    t = np.asarray(maturities, dtype=float)
    w = np.asarray(weights, dtype=float)
    if w.shape != t.shape:
        raise MarketDataError(f"{where}: one weight per liquid maturity is needed ({w.size} weights, {t.size} "
                              f"maturities)")
    for k in range(w.size):
        if not np.isfinite(w[k]) or w[k] < 0.0:
            raise MarketDataError(f"{where}: the weight {w[k]:g} at maturity {t[k]:g} must be a number not below 0")
    positive = np.flatnonzero(w > 0.0)
    if positive.size == 0:
        raise MarketDataError(
            f"{where}: no maturity has a positive weight, so there is no first smoothing point; the "
            "weights of the first smoothing point and the liquid maturities after it must sum to 1"
        )
    total = float(w.sum())
    if abs(total - 1.0) > _WEIGHT_SUM_TOL:
        listed = ", ".join(f"{t[k]:g}y: {w[k]:g}" for k in positive)
        raise MarketDataError(f"{where}: the weights sum to {total:.10g}, not 1 ({listed})")
    fsp = int(positive[0])
    if t[fsp] < 1.0 - _TIME_TOL:
        raise MarketDataError(
            f"{where}: the first smoothing point {t[fsp]:g} (the first maturity with a positive weight) is "
            "shorter than one year; the one-year forward into it is not defined"
        )
    return fsp


def last_liquid_forward_rate(
    maturities: np.ndarray, log_discounts: np.ndarray, weights: np.ndarray, *, where: str = "LLFR weights"
) -> tuple[int, float, np.ndarray]:
    """``(index of the FSP, LLFR, the forwards averaged)`` from the bootstrapped log discounts.

    The forwards array holds ``f(t_F - 1, t_F)`` at the FSP, ``f(t_F, t_k)`` after it and 0 before,
    ``(n,)``; the LLFR is ``weights @ forwards``.
    """
    t = np.asarray(maturities, dtype=float)
    lgd = np.asarray(log_discounts, dtype=float)
    w = np.asarray(weights, dtype=float)
    fsp = check_llfr_weights(t, w, where=where)
    nodes = np.concatenate(([0.0], t))
    values = np.concatenate(([0.0], lgd))
    t_f, l_f = t[fsp], lgd[fsp]
    forwards = np.zeros_like(t)
    forwards[fsp] = l_f - float(_log_discount(nodes, values, np.array([t_f - 1.0]))[0])
    after = np.arange(fsp + 1, t.size)
    forwards[after] = (lgd[after] - l_f) / (t[after] - t_f)
    return fsp, float(w @ forwards), forwards


# --------------------------------------------------------------------------------------------
# The curve
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True, kw_only=True)
class LastLiquidForwardCurve:
    """The fitted curve; same interface as ``SmithWilsonCurve`` and ``LogDiscountCurve``.

    knots: the liquid maturities up to and including the first smoothing point, ``(n,)``, the
        last one being the FSP. log_discounts: ``L = -ln P(0, t)`` there, ``(n,)``; ``L`` is
        linear between ``(0, 0)`` and the knots (a constant forward on each interval).
    last_liquid_forward_rate: the LLFR, continuously compounded.
    ultimate_forward_rate: the UFR, annually compounded (``omega = ln(1 + UFR)``).
    alpha: the convergence parameter (per year).
    long_end: the longest maturity the curve answers for (years).
    """

    knots: np.ndarray
    log_discounts: np.ndarray
    last_liquid_forward_rate: float
    ultimate_forward_rate: float
    alpha: float
    long_end: float = 150.0

    def __post_init__(self) -> None:
        t = np.asarray(self.knots, dtype=float)
        lgd = np.asarray(self.log_discounts, dtype=float)
        if t.ndim != 1 or t.shape != lgd.shape or t.size == 0:
            raise ValueError("knots and log_discounts must be 1-d arrays of one length")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(lgd))):
            raise ValueError("knots and log discounts must be finite")
        if t[0] <= 0.0 or np.any(np.diff(t) <= 0.0):
            raise ValueError("knots must be positive and strictly increasing")
        if not (self.alpha > 0.0 and np.isfinite(self.alpha)):
            raise ValueError("the convergence parameter alpha must be a positive number")
        if not self.ultimate_forward_rate > -1.0:
            raise ValueError("the ultimate forward rate must exceed -100%")
        if not np.isfinite(self.last_liquid_forward_rate):
            raise ValueError("the last liquid forward rate must be a finite number")
        if not self.long_end >= t[-1]:
            raise ValueError(
                f"long_end {self.long_end:g} must not be shorter than the first smoothing point {t[-1]:g}"
            )
        object.__setattr__(self, "knots", t)
        object.__setattr__(self, "log_discounts", lgd)

    @property
    def first_smoothing_point(self) -> float:
        return float(self.knots[-1])

    @property
    def omega(self) -> float:
        """Ultimate forward intensity ``ln(1 + UFR)``."""
        return float(np.log1p(self.ultimate_forward_rate))

    @property
    def max_maturity(self) -> float:
        return float(self.long_end)

    def _check(self, t: np.ndarray | float) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        if np.any(~np.isfinite(t)) or np.any(t < 0.0) or np.any(t > self.long_end * (1.0 + 1e-12)):
            raise ValueError(
                f"curve asked at t in [{np.min(t):g}, {np.max(t):g}] but it is defined on "
                f"[0, {self.long_end:g}] years only"
            )
        return t

    def log_discount(self, t: np.ndarray | float) -> np.ndarray:
        """``L(t) = -ln P(0, t)``, any shape of ``t``."""
        t = self._check(t)
        t_f = self.first_smoothing_point
        nodes = np.concatenate(([0.0], self.knots))
        values = np.concatenate(([0.0], self.log_discounts))
        inside = np.interp(np.minimum(t, t_f), nodes, values)
        h = np.maximum(t - t_f, 0.0)
        w, a = self.omega, self.alpha
        beyond = self.log_discounts[-1] + w * h + (self.last_liquid_forward_rate - w) * (-np.expm1(-a * h)) / a
        return np.where(t <= t_f, inside, beyond)

    def discount(self, t: np.ndarray | float) -> np.ndarray:
        """``P(0, t)``, any shape of ``t``."""
        return np.exp(-self.log_discount(t))

    def forward(self, t: np.ndarray | float) -> np.ndarray:
        """Instantaneous forward: constant on each interval up to the FSP (the interval's value at
        its right end), ``omega + (LLFR - omega) e^{-alpha (t - t_F)}`` beyond it."""
        t = self._check(t)
        nodes = np.concatenate(([0.0], self.knots))
        values = np.concatenate(([0.0], self.log_discounts))
        slopes = np.diff(values) / np.diff(nodes)
        seg = np.clip(np.searchsorted(self.knots, t, side="left"), 0, slopes.size - 1)
        h = t - self.first_smoothing_point
        w = self.omega
        beyond = w + (self.last_liquid_forward_rate - w) * np.exp(-self.alpha * np.maximum(h, 0.0))
        return np.where(h <= 0.0, slopes[seg], beyond)

    def zero_rate(self, t: np.ndarray | float) -> np.ndarray:
        """Continuously compounded zero rate; at ``t = 0`` the short end ``f(0, 0)``."""
        t = self._check(t)
        safe = np.where(t > 0.0, t, 1.0)
        return np.where(t > 0.0, self.log_discount(t) / safe, self.forward(np.zeros_like(t)))

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
class LastLiquidForwardReport:
    """How a fit went.

    first_smoothing_point: ``t_F`` (years); last_liquid_forward_rate: the LLFR (continuous).
    alpha and alpha_source: the convergence parameter and how it was chosen.
    ufr: annually compounded; omega: ``ln(1 + UFR)``.
    maturities, weights, forwards: the liquid maturities, their LLFR weights and the forwards
    averaged (``f(t_F - 1, t_F)`` at the FSP, ``f(t_F, t_k)`` after it), each ``(n,)``.
    max_repricing_error: ``max_i |sum_j c_ij P(u_j) - m_i|`` over the inputs up to the FSP.
    """

    method: str = METHOD_NAME
    first_smoothing_point: float
    last_liquid_forward_rate: float
    alpha: float
    alpha_source: str
    ufr: float
    omega: float
    credit_risk_adjustment_bp: float
    input_kind: str
    n_instruments: int
    maturities: tuple[float, ...]
    weights: tuple[float, ...]
    forwards: tuple[float, ...]
    max_repricing_error: float


def fit_last_liquid_forward(
    instruments: CurveInstruments,
    *,
    ufr: float,
    llfr_weights: np.ndarray,
    alpha: float | None = None,
    phase_in_year: int | None = None,
    currency: str | None = None,
    long_end: float = 150.0,
    where: str = "LLFR weights",
) -> tuple[LastLiquidForwardCurve, LastLiquidForwardReport]:
    """Bootstrap ``instruments`` with constant forwards, take the LLFR from ``llfr_weights`` (one
    per instrument, in the instruments' order) and extrapolate beyond the first smoothing point.

    ufr: annually compounded (decimal); read the current value from the regulator's publication.
    alpha / phase_in_year / currency: see :func:`convergence_alpha`. where: names the weights'
    source in error messages.
    """
    if not ufr > -1.0:
        raise ValueError("the ultimate forward rate must exceed -100%")
    a, how = convergence_alpha(alpha=alpha, phase_in_year=phase_in_year, currency=currency)
    t, lgd = bootstrap_constant_forward(instruments)
    fsp, llfr, forwards = last_liquid_forward_rate(t, lgd, np.asarray(llfr_weights, dtype=float), where=where)
    if long_end < t[fsp]:
        raise ValueError(f"long_end {long_end:g} is shorter than the first smoothing point {t[fsp]:g}")
    curve = LastLiquidForwardCurve(
        knots=t[: fsp + 1],
        log_discounts=lgd[: fsp + 1],
        last_liquid_forward_rate=llfr,
        ultimate_forward_rate=float(ufr),
        alpha=a,
        long_end=float(long_end),
    )
    used = slice(0, fsp + 1)
    c, u = instruments.cash_flows[used], instruments.cash_flow_times
    on_curve = u <= t[fsp] + _TIME_TOL
    values = c[:, on_curve] @ curve.discount(u[on_curve])
    report = LastLiquidForwardReport(
        first_smoothing_point=float(t[fsp]),
        last_liquid_forward_rate=llfr,
        alpha=a,
        alpha_source=how,
        ufr=float(ufr),
        omega=curve.omega,
        credit_risk_adjustment_bp=instruments.credit_risk_adjustment_bp,
        input_kind=instruments.kind,
        n_instruments=int(instruments.market_values.size),
        maturities=tuple(float(x) for x in t),
        weights=tuple(float(x) for x in np.asarray(llfr_weights, dtype=float)),
        forwards=tuple(float(x) for x in forwards),
        max_repricing_error=float(np.max(np.abs(values - instruments.market_values[used]))),
    )
    return curve, report


def _fit(instruments: CurveInstruments, *, ufr: float, **options: Any) -> tuple[LastLiquidForwardCurve,
                                                                                LastLiquidForwardReport]:
    return fit_last_liquid_forward(instruments, ufr=ufr, **options)


if METHOD_NAME not in EXTRAPOLATION_METHODS:
    register_extrapolation_method(METHOD_NAME, _fit)
