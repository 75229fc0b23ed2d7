"""Hull-White one-factor short-rate model, fitted exactly to today's curve.

    r_t = x_t + alpha(t),   dx_t = -a x_t dt + sigma dW^Q_t,   x_0 = 0,
    alpha(t) = f(0, t) + sigma^2 / (2 a^2) (1 - e^{-a t})^2.

Closed forms (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006,
ch. 3.3), written in ``x`` so that neither bond prices nor the cash account need ``f(0, t)``:

    B(u) = (1 - e^{-a u}) / a,
    V(u) = sigma^2 / a^2 [u - 2 B(u) + (1 - e^{-2 a u}) / (2 a)]    (variance of int_0^u x ds),
    P(t, T) = P(0,T)/P(0,t) exp(-B(T-t) x_t + (V(T-t) - V(T) + V(t)) / 2),
    B_t = exp(I_t + V(t)/2) / P(0, t),   I_t = int_0^t x_s ds.

The functions take ``a > 0``; for small ``a u`` they switch to power series, so ``a -> 0``
(Ho-Lee) is smooth rather than a cancellation.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np
from scipy.stats import norm

from pqflow.market.curve import DiscountCurve
from pqflow.models.schedule import PiecewiseConstant

__all__ = [
    "HullWhiteParams",
    "b_factor",
    "integrated_variance",
    "phi2",
    "alpha",
    "zcb_price",
    "cash_account",
    "zero_bond_option",
]

_SERIES_CUTOFF = 0.02  # below this value of a*u the power series is used (25 terms: exact to 1e-16)
_TERMS = 25


@dataclass(frozen=True, kw_only=True)
class HullWhiteParams:
    """Mean reversion ``a`` (per year, > 0) and volatility ``sigma`` (absolute, per sqrt year).

    Implements :class:`pqflow.models.rates.RatesModel` (one factor ``x`` on the driver
    ``rates``)."""

    mean_reversion: float
    volatility: float

    model: ClassVar[str] = "hull_white"
    label: ClassVar[str] = "Hull-White"
    drivers: ClassVar[tuple[str, ...]] = ("rates",)
    factor_names: ClassVar[tuple[str, ...]] = ("x",)
    #: ``x`` and ``int x`` (hence the driver's increments) follow from the short rate and the
    #: cash account columns.
    recoverable_drivers: ClassVar[tuple[str, ...]] = ("rates",)

    def __post_init__(self) -> None:
        if not self.mean_reversion > 0.0:
            raise ValueError("Hull-White mean reversion must be positive")
        if not self.volatility >= 0.0:
            raise ValueError("Hull-White volatility must not be negative")

    # ------------------------------------------------------------- the RatesModel protocol

    def factor_rates(self) -> tuple[tuple[float, float, str], ...]:
        return ((self.mean_reversion, self.volatility, "rates"),)

    def integrated_variance(self, u: np.ndarray | float) -> np.ndarray:
        return integrated_variance(self, u)

    def short_rate_shift(self, curve: DiscountCurve, t: np.ndarray | float) -> np.ndarray:
        return alpha(curve, self, t)

    def bond_exponents(
        self, curve: DiscountCurve, times: np.ndarray, maturities: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        log_a = np.log(zcb_price(curve, self, times[None, :], maturities[:, None], 0.0))
        return log_a, b_factor(self.mean_reversion, maturities)[:, None]

    def fixed_correlations(self) -> dict[tuple[str, str], float]:
        return {}

    def equity_correlation(self, correlation: Any, *, strict: bool | None) -> float:
        if np.ndim(correlation) != 0:
            raise ValueError(
                "under Hull-White rates the equity correlation is one number (with the short-rate "
                f"shock), not {correlation!r}; a pair (rho_xS, rho_yS) goes with G2++ parameters"
            )
        if strict and not -1.0 < correlation < 1.0:
            raise ValueError("equity-rate correlation must lie strictly inside (-1, 1)")
        if strict is False and not -1.0 <= correlation <= 1.0:
            raise ValueError("correlation must lie in [-1, 1]")
        return correlation

    def equity_loadings(self, correlation: Any) -> tuple[tuple[float, float], ...]:
        return ((float(correlation) * self.volatility, self.mean_reversion),)

    def describe_with_equity(self, correlation: Any) -> str:
        return f"Hull-White sigma {self.volatility:g}, a {self.mean_reversion:g}, correlation {correlation:g}"

    def short_rate_correlation(self, correlation: Any) -> float:
        if isinstance(correlation, tuple):
            raise ValueError("under Hull-White rates an index's correlation with the rates is one number")
        return float(correlation)

    def split_price_of_risk(self, lam: float | PiecewiseConstant) -> dict[str, float | PiecewiseConstant]:
        return {self.drivers[0]: lam}

    def price_of_risk_weights(self) -> tuple[float, ...]:
        return (1.0,)

    def log_bond_constant(self, curve: DiscountCurve, t: np.ndarray, maturity: float) -> np.ndarray:
        """``ln A(t, M) = ln P(0, t+M) / P(0, t) + (V(M) - V(t+M) + V(t)) / 2`` (the
        Hull-White bond price of Brigo and Mercurio 2006, ch. 3.3, written with the integrated
        variance ``V`` of ``int r``)."""
        v = integrated_variance
        return (
            np.log(curve.discount(t + maturity))
            - np.log(curve.discount(t))
            + 0.5 * (v(self, maturity) - v(self, t + maturity) + v(self, t))
        )

    def zero_factor_mean(self, t: np.ndarray) -> np.ndarray:
        return np.zeros_like(t)

    def to_json(self) -> dict[str, Any]:
        return {"hull_white": {"mean_reversion": self.mean_reversion, "volatility": self.volatility}}

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> HullWhiteParams:
        return cls(mean_reversion=data["mean_reversion"], volatility=data["volatility"])


def _series(a: np.ndarray, u: np.ndarray, first: int, coef) -> np.ndarray:
    total = np.zeros(np.broadcast(a, u).shape)
    for k in range(first, first + _TERMS):
        total = total + coef(k) * a ** (k - first) * u**k
    return total


def b_factor(a: float | np.ndarray, u: np.ndarray | float) -> np.ndarray:
    """``B(u) = (1 - e^{-a u}) / a``."""
    a = np.asarray(a, dtype=float)
    u = np.asarray(u, dtype=float)
    return -np.expm1(-a * u) / a


def phi2(a: float | np.ndarray, u: np.ndarray | float) -> np.ndarray:
    """``(u - B(u)) / a = int_0^u B(s) ds``, stable for small ``a u``."""
    a = np.asarray(a, dtype=float)
    u = np.asarray(u, dtype=float)
    small = np.abs(a * u) < _SERIES_CUTOFF
    direct = (u - b_factor(a, u)) / a
    if not small.any():  # the series would be computed only to be discarded by np.where
        return np.asarray(direct)
    from math import factorial

    series = _series(a, u, 2, lambda k: (-1) ** k / factorial(k))
    return np.where(small, series, direct)


def _phi3(a: float | np.ndarray, u: np.ndarray | float) -> np.ndarray:
    """``[u - 2 B(u) + (1 - e^{-2au})/(2a)] / a^2``, so that ``V = sigma^2 phi3``."""
    a = np.asarray(a, dtype=float)
    u = np.asarray(u, dtype=float)
    small = np.abs(a * u) < _SERIES_CUTOFF
    direct = (u - 2.0 * b_factor(a, u) + b_factor(2.0 * a, u)) / a**2
    if not small.any():  # the series would be computed only to be discarded by np.where
        return np.asarray(direct)
    from math import factorial

    series = _series(a, u, 3, lambda k: (-1) ** (k + 1) * (2 ** (k - 1) - 2) / factorial(k))
    return np.where(small, series, direct)


def integrated_variance(params: HullWhiteParams, u: np.ndarray | float) -> np.ndarray:
    """``V(u)``: variance of ``int_0^u x_s ds`` given ``x_0 = 0``."""
    return params.volatility**2 * _phi3(params.mean_reversion, u)


def alpha(curve: DiscountCurve, params: HullWhiteParams, t: np.ndarray | float) -> np.ndarray:
    """Deterministic shift ``alpha(t) = f(0,t) + sigma^2 B(t)^2 / 2`` that fits today's curve."""
    b = b_factor(params.mean_reversion, t)
    return curve.forward(t) + 0.5 * params.volatility**2 * b**2


def zcb_price(
    curve: DiscountCurve,
    params: HullWhiteParams,
    t: np.ndarray | float,
    maturity: np.ndarray | float,
    x: np.ndarray | float,
) -> np.ndarray:
    """``P(t, t + m)`` given the factor ``x_t``; all arguments broadcast together."""
    t = np.asarray(t, dtype=float)
    m = np.asarray(maturity, dtype=float)
    log_a = (
        np.log(curve.discount(t + m))
        - np.log(curve.discount(t))
        + 0.5
        * (
            integrated_variance(params, m)
            - integrated_variance(params, t + m)
            + integrated_variance(params, t)
        )
    )
    return np.exp(log_a - b_factor(params.mean_reversion, m) * np.asarray(x, dtype=float))


def cash_account(
    curve: DiscountCurve, params: HullWhiteParams, t: np.ndarray | float, integral_x: np.ndarray | float
) -> np.ndarray:
    """``B_t = exp(int_0^t r ds) = exp(I_t + V(t)/2) / P(0, t)``."""
    return np.exp(np.asarray(integral_x) + 0.5 * integrated_variance(params, t)) / curve.discount(t)


def zero_bond_option(
    curve: DiscountCurve,
    params: HullWhiteParams,
    *,
    expiry: float,
    bond_maturity: float,
    strike: float,
    kind: str = "call",
) -> float:
    """Price today of a European option expiring at ``expiry`` on the zero bond maturing at
    ``bond_maturity``, strike in bond-price units (Brigo and Mercurio 2006, eq. 3.40-3.41)."""
    if not 0.0 < expiry < bond_maturity:
        raise ValueError("need 0 < expiry < bond_maturity")
    a, s = params.mean_reversion, params.volatility
    p_t = float(curve.discount(expiry))
    p_s = float(curve.discount(bond_maturity))
    sigma_p = s * np.sqrt(float(b_factor(2.0 * a, expiry))) * float(b_factor(a, bond_maturity - expiry))
    if kind not in ("call", "put"):
        raise ValueError(f"kind must be 'call' or 'put', not {kind!r}")
    if sigma_p == 0.0:  # deterministic rates: the discounted intrinsic value
        intrinsic = p_s - strike * p_t
        return float(max(intrinsic, 0.0) if kind == "call" else max(-intrinsic, 0.0))
    h = np.log(p_s / (p_t * strike)) / sigma_p + 0.5 * sigma_p
    if kind == "call":
        return float(p_s * norm.cdf(h) - strike * p_t * norm.cdf(h - sigma_p))
    if kind == "put":
        return float(strike * p_t * norm.cdf(-h + sigma_p) - p_s * norm.cdf(-h))
    raise ValueError(f"kind must be 'call' or 'put', not {kind!r}")
