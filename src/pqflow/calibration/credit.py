"""Credit calibration: a piecewise-flat hazard curve per rating from zero-coupon spreads, and
the CIR++ parameters that carry it (:mod:`pqflow.models.cir_credit`).

Inputs and conventions. Per rating the market gives zero-coupon spreads ``s_i`` (decimals,
continuously compounded, over the risk-free zero rate of the same maturity) at maturities
``T_1 < ... < T_n`` years, and a recovery rate ``R`` (recovery of market value, Duffie and
Singleton 1999). Under that recovery convention the defaultable zero-coupon bond is
``P(0,T) exp(-s(T) T)`` and, for a deterministic intensity ``h``, ``s(T) T = (1 - R) int_0^T h``.
The bootstrap takes ``h`` flat between pillars,

    h_i = (s_i T_i - s_{i-1} T_{i-1}) / ((1 - R)(T_i - T_{i-1})),     s_0 T_0 = 0,

so a flat spread curve gives the credit triangle ``h = s / (1 - R)`` (common practice), and the
curve is flat after the last pillar. A negative ``h_i`` (``s_i T_i < s_{i-1} T_{i-1}``: a longer
bond would be worth more than a shorter one relative to the risk-free bonds) is refused with
:class:`pqflow.errors.CalibrationError`.

The CIR++ shift ``psi`` then reprices every spread exactly, whatever ``(kappa, mu, nu, y_0)``:
those four are either given or fitted *loosely* so that the CIR part alone explains the shape
of the hazard curve, i.e. the shift is small and not negative. The loose fit solves, over a
grid of times ``t_k`` (every ``grid_step`` years to the last pillar, plus both sides of each
pillar, where ``psi`` jumps with the hazard),

    minimise  mean_k psi(t_k)^2   subject to  psi(t_k) >= 0   [and 2 kappa mu >= nu^2]

over the free parameters within bounds (``scipy.optimize.minimize``, SLSQP), the constraint
keeping the intensity positive (the positivity condition discussed by Brigo and Alfonsi 2005)
and, if asked, the Feller condition. The spread curve carries little information on ``nu`` (it
enters only through a convexity term), so ``nu`` is best taken from spread history or option
quotes and kept fixed; the default frees ``kappa``, ``mu`` and ``y_0``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np
from scipy.optimize import minimize

from pqflow.errors import CalibrationError, MarketDataError
from pqflow.models.cir_credit import (
    CirCreditModel,
    CirParams,
    CreditRating,
    HazardCurve,
    cir_forward,
    shift,
    zero_spread,
)

__all__ = [
    "ZeroSpreadCurve",
    "bootstrap_hazard_curve",
    "CreditFitRow",
    "CreditFitReport",
    "RatingCalibration",
    "CreditCalibration",
    "calibrate_rating",
    "calibrate_credit",
    "CIR_PARAMETERS",
]

#: Names of the CIR parameters that can be fitted, as in :class:`CirParams`.
CIR_PARAMETERS = ("mean_reversion", "long_run_mean", "volatility", "initial")
_BOUNDS = {
    "mean_reversion": (1e-3, 5.0),
    "long_run_mean": (0.0, 1.0),
    "volatility": (1e-4, 2.0),
    "initial": (0.0, 1.0),
}


@dataclass(frozen=True, kw_only=True)
class ZeroSpreadCurve:
    """A rating's zero-coupon spread curve: ``maturities`` ``(n,)`` in years (positive,
    strictly increasing), ``spreads`` ``(n,)`` decimals (continuously compounded, over the
    risk-free zero rate; 120 bp is 0.012) and the ``recovery`` rate (market value, in [0, 1))."""

    rating: str
    maturities: np.ndarray
    spreads: np.ndarray
    recovery: float

    def __post_init__(self) -> None:
        t = np.atleast_1d(np.array(self.maturities, dtype=float))
        s = np.atleast_1d(np.array(self.spreads, dtype=float))
        who = f"spread curve {self.rating!r}"
        if t.ndim != 1 or t.shape != s.shape or t.size == 0:
            raise MarketDataError(f"{who}: maturities and spreads must be 1-d and of one length")
        if not (np.all(np.isfinite(t)) and np.all(np.isfinite(s))):
            raise MarketDataError(f"{who}: maturities and spreads must be finite numbers")
        if t[0] <= 0.0 or np.any(np.diff(t) <= 0.0):
            raise MarketDataError(f"{who}: maturities must be positive and strictly increasing")
        bad = np.flatnonzero((s < 0.0) | (s >= 1.0))
        if bad.size:
            i = int(bad[0])
            raise MarketDataError(
                f"{who}: spread {s[i]!r} at {t[i]:g}y must lie in [0, 1) (a decimal: 120 bp is "
                "0.012)"
            )
        if not (np.isfinite(self.recovery) and 0.0 <= self.recovery < 1.0):
            raise MarketDataError(f"{who}: recovery {self.recovery!r} must lie in [0, 1)")
        t.flags.writeable = False
        s.flags.writeable = False
        object.__setattr__(self, "maturities", t)
        object.__setattr__(self, "spreads", s)


def bootstrap_hazard_curve(curve: ZeroSpreadCurve) -> HazardCurve:
    """Piecewise-flat hazard curve that reprices ``curve`` exactly (module doc)."""
    t, s = curve.maturities, curve.spreads
    total = s * t  # -ln of the defaultable bond over the risk-free one
    prev_t = np.concatenate(([0.0], t[:-1]))
    prev_total = np.concatenate(([0.0], total[:-1]))
    haz = (total - prev_total) / ((1.0 - curve.recovery) * (t - prev_t))
    neg = np.flatnonzero(haz < 0.0)
    if neg.size:
        i = int(neg[0])
        raise CalibrationError(
            f"spread curve {curve.rating!r}: the spreads imply a negative hazard rate "
            f"{haz[i]:.3g} on ({prev_t[i]:g}y, {t[i]:g}y] (s*T falls from {prev_total[i]:.6g} to "
            f"{total[i]:.6g}); a defaultable bond cannot gain value relative to the risk-free "
            "bond as its maturity grows. Check the quotes."
        )
    return HazardCurve(knots=t, hazards=haz)


@dataclass(frozen=True, kw_only=True)
class CreditFitRow:
    """One input spread repriced at time 0: spreads as decimals, ``error_bp`` model minus
    market in basis points; ``hazard`` the bootstrapped hazard on the bucket ending here and
    ``shift`` the CIR++ shift ``psi`` at the pillar."""

    maturity: float
    market_spread: float
    model_spread: float
    error_bp: float
    hazard: float
    shift: float


@dataclass(frozen=True, kw_only=True)
class CreditFitReport:
    """How one rating was fitted.

    params: the CIR parameters used; fitted: the names that were fitted (empty: all given);
    rows: the input spreads repriced (exact up to rounding); max_abs_error_bp over the rows;
    min_shift, max_shift, rms_shift: ``psi`` on the check grid (per year), and
    shift_nonnegative (``min_shift >= -1e-12``); feller_ratio ``2 kappa mu / nu^2``;
    optimizer_success and message from the loose fit (``True`` and ``"given"`` if nothing was
    fitted).
    """

    rating: str
    params: CirParams
    fitted: tuple[str, ...]
    rows: tuple[CreditFitRow, ...]
    max_abs_error_bp: float
    min_shift: float
    max_shift: float
    rms_shift: float
    shift_nonnegative: bool
    feller_ratio: float
    optimizer_success: bool
    message: str


@dataclass(frozen=True, kw_only=True)
class RatingCalibration:
    """A fitted rating and its report."""

    rating: CreditRating
    report: CreditFitReport


@dataclass(frozen=True, kw_only=True)
class CreditCalibration:
    """The credit model built from all ratings, and one report per rating (same order)."""

    model: CirCreditModel
    reports: tuple[CreditFitReport, ...]


def _check_grid(hazard: HazardCurve, step: float) -> np.ndarray:
    """Times ``(k,)`` on which the shift is checked: a regular grid to the last pillar plus
    the pillars (where ``psi`` is left-continuous) and the points just after them."""
    last = float(hazard.knots[-1])
    grid = np.arange(0.0, last + 0.5 * step, step)
    after = np.minimum(hazard.knots[:-1] + 1e-9, last)
    return np.unique(np.concatenate((grid, hazard.knots, after, [0.0])))


def _feller_gap(p: CirParams) -> float:
    """``2 kappa mu - nu^2`` (not negative under Feller)."""
    return 2.0 * p.mean_reversion * p.long_run_mean - p.volatility**2


def _feller_mean(p: CirParams) -> float:
    """Smallest ``mu`` that satisfies Feller, ``nu^2 / (2 kappa)``."""
    return p.volatility**2 / (2.0 * p.mean_reversion)


def _largest_scale(target: np.ndarray, fixed: np.ndarray, part: np.ndarray) -> float:
    """Largest ``a`` in ``[0, 1]`` with ``fixed + a part <= target`` on the grid (``part >= 0``)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(part > 0.0, (target - fixed) / part, np.inf)
    return float(np.clip(np.min(ratio), 0.0, 1.0))


def _project_nonnegative(
    p: CirParams,
    fit: tuple[str, ...],
    hazard: HazardCurve,
    recovery: float,
    grid: np.ndarray,
    require_feller: bool,
) -> CirParams:
    """Make ``psi >= 0`` on ``grid`` exactly after the penalised fit.

    Given ``kappa`` and ``nu`` the CIR forward is linear in ``(mu, y_0)``: ``f_L = mu g_1 + y_0
    g_2`` with ``g_1, g_2 >= 0`` (see :func:`pqflow.models.cir_credit.cir_forward`), and
    ``psi = h - f_L / L``. The fitted ones of ``mu`` and ``y_0`` are scaled down by the largest
    factor ``<= 1`` that gives ``f_L <= L h`` at every grid time; with ``require_feller``, ``mu``
    stops at ``nu^2 / (2 kappa)`` and ``y_0`` alone takes the rest. Nothing changes if the shift
    is already not negative; if even this cannot make it so, the caller's check reports it."""
    scaled = [f for f in ("long_run_mean", "initial") if f in fit]
    if not scaled:
        return p
    loss = 1.0 - recovery
    target = loss * hazard.hazard(grid)
    f_mu = cir_forward(replace(p, initial=0.0), loss, grid)
    f_y = cir_forward(replace(p, long_run_mean=0.0), loss, grid)
    if np.all(f_mu + f_y <= target):
        return p
    mu, y0 = p.long_run_mean, p.initial
    if len(scaled) == 2:
        a = _largest_scale(target, np.zeros_like(target), f_mu + f_y)
        mu_new, y0_new = a * mu, a * y0
        if require_feller and mu_new < _feller_mean(p) <= mu:
            mu_new = _feller_mean(p)
            keep = f_mu * (mu_new / mu) if mu > 0.0 else np.zeros_like(target)
            y0_new = y0 * _largest_scale(target, keep, f_y)
        return replace(p, long_run_mean=mu_new, initial=y0_new)
    if scaled == ["long_run_mean"]:
        return replace(p, long_run_mean=mu * _largest_scale(target, f_y, f_mu))
    return replace(p, initial=y0 * _largest_scale(target, f_mu, f_y))


def _rating(name: str, params: CirParams, hazard: HazardCurve, recovery: float, theta: float) -> CreditRating:
    return CreditRating(name=name, cir=params, hazard=hazard, recovery=recovery, price_of_risk=theta)


def calibrate_rating(
    curve: ZeroSpreadCurve,
    *,
    cir: CirParams,
    fit: Sequence[str] = (),
    price_of_risk: float = 0.0,
    require_feller: bool = False,
    allow_negative_shift: bool = False,
    grid_step: float = 0.25,
) -> RatingCalibration:
    """Fit one rating: ``psi`` exactly to ``curve``; the CIR parameters ``fit`` (names from
    ``CIR_PARAMETERS``) loosely to its shape, starting from ``cir`` (the others stay as given).

    The loose fit is the constrained problem of the module doc on a grid of ``grid_step``
    years; ``require_feller`` adds ``2 kappa mu >= nu^2`` and refuses parameters that break it;
    ``price_of_risk`` (``theta``, ``lambda^P = theta sqrt(y)``) is stored on the rating and
    plays no part in the fit.

    Raises :class:`CalibrationError` if the spreads imply a negative hazard, or if the final
    shift is negative somewhere on the check grid and ``allow_negative_shift`` is false (the
    intensity could then be negative: lower ``y_0`` or ``mu``, or fit them).
    """
    unknown = [f for f in fit if f not in CIR_PARAMETERS]
    if unknown:
        raise ValueError(f"cannot fit {unknown}: choose from {CIR_PARAMETERS}")
    fit = tuple(dict.fromkeys(fit))
    hazard = bootstrap_hazard_curve(curve)
    grid = _check_grid(hazard, grid_step)
    params = cir
    success, message = True, "given"
    if fit:
        lo = np.array([_BOUNDS[f][0] for f in fit])
        hi = np.array([_BOUNDS[f][1] for f in fit])
        if "initial" in fit:  # psi(0) = h(0) - y_0 >= 0 needs y_0 <= h(0)
            hi[fit.index("initial")] = max(float(hazard.hazards[0]), 1e-12)
        x0 = np.clip(np.array([getattr(cir, f) for f in fit]), lo, hi)
        scale = 1.0 / max(float(np.max(hazard.hazards)), 1e-6)  # psi in units of the hazard

        def make(x: np.ndarray) -> CirParams:
            return replace(cir, **{f: float(v) for f, v in zip(fit, x, strict=True)})

        def scaled_shift(x: np.ndarray) -> np.ndarray:
            return shift(_rating(curve.rating, make(x), hazard, curve.recovery, 0.0), grid) * scale

        def objective(x: np.ndarray) -> float:
            return float(np.mean(scaled_shift(x) ** 2))

        constraints = [{"type": "ineq", "fun": scaled_shift}]  # psi >= 0 on the grid
        if require_feller:  # 2 kappa mu - nu^2 >= 0
            constraints.append(
                {"type": "ineq", "fun": lambda x: np.array([_feller_gap(make(x)) * scale])}
            )
        res = minimize(
            objective,
            x0,
            method="SLSQP",
            bounds=list(zip(lo, hi, strict=True)),
            constraints=constraints,
            options={"ftol": 1e-14, "maxiter": 500},
        )
        params = _project_nonnegative(make(res.x), fit, hazard, curve.recovery, grid, require_feller)
        success, message = bool(res.success), str(res.message)
    rating = _rating(curve.rating, params, hazard, curve.recovery, price_of_risk)
    psi_grid = shift(rating, grid)
    model_spreads = zero_spread(rating, 0.0, curve.maturities, params.initial)
    errors_bp = (model_spreads - curve.spreads) * 1e4
    rows = tuple(
        CreditFitRow(
            maturity=float(t),
            market_spread=float(s),
            model_spread=float(m),
            error_bp=float(e),
            hazard=float(h),
            shift=float(p),
        )
        for t, s, m, e, h, p in zip(
            curve.maturities, curve.spreads, model_spreads, errors_bp, hazard.hazards,
            shift(rating, curve.maturities), strict=True,
        )
    )
    min_shift = float(np.min(psi_grid))
    report = CreditFitReport(
        rating=curve.rating,
        params=params,
        fitted=fit,
        rows=rows,
        max_abs_error_bp=float(np.max(np.abs(errors_bp))),
        min_shift=min_shift,
        max_shift=float(np.max(psi_grid)),
        rms_shift=float(np.sqrt(np.mean(psi_grid**2))),
        shift_nonnegative=min_shift >= -1e-12,
        feller_ratio=params.feller_ratio,
        optimizer_success=success,
        message=message,
    )
    if require_feller and params.feller_ratio < 1.0 - 1e-9:
        raise CalibrationError(
            f"rating {curve.rating!r}: the parameters do not satisfy the Feller condition "
            f"(2 kappa mu / nu^2 = {params.feller_ratio:.4g} < 1); lower nu or free kappa and mu"
        )
    if not report.shift_nonnegative and not allow_negative_shift:
        t_min = float(grid[int(np.argmin(psi_grid))])
        raise CalibrationError(
            f"rating {curve.rating!r}: the CIR++ shift is negative ({min_shift:.3g} per year at "
            f"t = {t_min:g}y), so the intensity could be negative; the CIR part "
            f"(kappa={params.mean_reversion:g}, mu={params.long_run_mean:g}, "
            f"nu={params.volatility:g}, y0={params.initial:g}) exceeds the market hazard there. "
            "Lower y0 or mu, fit them, or pass allow_negative_shift=True."
            + (
                " With require_feller the Feller condition may force the CIR forward curve "
                "above the market hazard: lower nu."
                if require_feller
                else ""
            )
        )
    return RatingCalibration(rating=rating, report=report)


def calibrate_credit(
    curves: Sequence[ZeroSpreadCurve],
    *,
    cir: Mapping[str, CirParams],
    bond_maturities: Sequence[float],
    fit: Sequence[str] = (),
    prices_of_risk: Mapping[str, float] | None = None,
    correlation: np.ndarray | None = None,
    require_feller: bool = False,
    allow_negative_shift: bool = False,
) -> CreditCalibration:
    """Calibrate every rating (:func:`calibrate_rating`, same ``fit`` for all) and build the
    :class:`CirCreditModel`; ``cir`` and ``prices_of_risk`` are keyed by rating name,
    ``correlation`` is ``(d, d)`` in the order of ``curves``."""
    names = [c.rating for c in curves]
    missing = [n for n in names if n not in cir]
    if missing:
        raise ValueError(f"no CIR parameters (or starting values) for ratings {missing}")
    thetas = dict(prices_of_risk or {})
    extra = [n for n in thetas if n not in names]
    if extra:
        raise ValueError(f"prices of risk given for unknown ratings {extra}")
    fitted = [
        calibrate_rating(
            c,
            cir=cir[c.rating],
            fit=fit,
            price_of_risk=float(thetas.get(c.rating, 0.0)),
            require_feller=require_feller,
            allow_negative_shift=allow_negative_shift,
        )
        for c in curves
    ]
    model = CirCreditModel(
        ratings=tuple(f.rating for f in fitted),
        bond_maturities=tuple(bond_maturities),
        correlation=correlation,
    )
    return CreditCalibration(model=model, reports=tuple(f.report for f in fitted))
