"""G2++: the two-factor additive Gaussian short-rate model, fitted exactly to today's curve.

    r_t = x_t + y_t + phi(t),   x_0 = y_0 = 0,
    dx_t = -a x_t dt + sigma dW1_t,   dy_t = -b y_t dt + eta dW2_t,   dW1 dW2 = rho dt,

under the market-consistent measure Q (Brigo and Mercurio, *Interest Rate Models - Theory and
Practice*, 2nd ed., 2006, ch. 4.2; the model is equivalent to the two-factor Hull-White model).
With ``B_k(u) = (1 - e^{-k u}) / k`` and ``I_t = int_0^t (x + y) ds``:

    V(u)    = Var int_0^u (x + y) ds   (from x_0 = y_0 = 0)
            = sigma^2 K(a, a; u) + eta^2 K(b, b; u) + 2 rho sigma eta K(a, b; u),
    K(k, c; u) = int_0^u B_k(s) B_c(s) ds = [u - B_k(u) - B_c(u) + B_{k+c}(u)] / (k c),
    phi(t)  = f(0, t) + sigma^2 B_a(t)^2 / 2 + eta^2 B_b(t)^2 / 2 + rho sigma eta B_a(t) B_b(t),
    P(t, T) = P(0,T)/P(0,t) exp((V(T-t) - V(T) + V(t)) / 2 - B_a(T-t) x_t - B_b(T-t) y_t),
    B_t     = exp(int_0^t r ds) = exp(I_t + V(t)/2) / P(0, t)

(Brigo and Mercurio 2006, eqs. 4.10, 4.12 and 4.14, equation numbers from memory). Neither bond
prices nor the cash account need ``f(0, t)``; only the short-rate output does.

Under the ``T``-forward measure ``x_T`` and ``y_T`` are jointly Gaussian (Brigo and Mercurio
2006, ch. 4.2.4, from memory) with

    mu_x = -sigma^2/a [B_a(T) - B_2a(T)] - rho sigma eta / b [B_a(T) - B_{a+b}(T)],
    mu_y = -eta^2/b [B_b(T) - B_2b(T)] - rho sigma eta / a [B_b(T) - B_{a+b}(T)],
    sigma_x^2 = sigma^2 B_2a(T),   sigma_y^2 = eta^2 B_2b(T),
    rho_xy sigma_x sigma_y = rho sigma eta B_{a+b}(T),

which gives the zero-bond option in closed form (Black's formula on ``P(0, S)`` against
``X P(0, T)`` with ``Sigma^2 = Var[B_a(S-T) x_T + B_b(S-T) y_T]``; Brigo and Mercurio 2006,
eq. 4.28 or thereabouts, from memory) and the European option on a coupon bond, hence the
swaption, as a one-dimensional integral (Brigo and Mercurio 2006, eq. 4.31, from memory): given
the first factor the coupon bond is decreasing in the second, so it crosses the strike at one
level ``y_bar(x)`` and the conditional expectation over the second factor is closed form.

Numerics. The kernel integrals ``K`` and ``J(k, c; u) = int_0^u e^{-k s} B_c(s) ds =
[B_k(u) - B_{k+c}(u)] / c`` cancel catastrophically when ``k u`` or ``c u`` is small, so they
switch to power series (both small), to a series in the small rate with incomplete-gamma
moments of the large one (one small), or use the closed form (both large): exact to rounding
for any positive ``a, b``. The swaption integral uses the trapezoid rule on a uniform grid of
the standardised outer factor (spectrally accurate for this smooth Gaussian integrand), and
integrates over the factor that contributes less to the swap's variance so that the inner,
closed-form, expectation smooths the exercise boundary as much as possible.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import factorial
from typing import Any, ClassVar

import numpy as np
from scipy.special import gammainc, ndtr
from scipy.stats import norm

from pqflow.market.curve import DiscountCurve
from pqflow.models.hull_white import b_factor, phi2
from pqflow.models.schedule import PiecewiseConstant, as_schedule

__all__ = [
    "G2PlusPlusParams",
    "exp_b_integral",
    "b_b_integral",
    "integrated_variance",
    "phi",
    "zcb_price",
    "cash_account",
    "ForwardMeasureMoments",
    "forward_measure_moments",
    "zero_bond_option",
    "coupon_bond_option",
    "swaption_price",
]

_TERMS = 25  # terms of every power series (arguments below 1: truncation below 1e-25)
_DEFAULT_NODES = 241  # trapezoid nodes of the swaption integral
_DEFAULT_RANGE = 10.0  # half-width of the swaption integral, in standard deviations


@dataclass(frozen=True, kw_only=True)
class G2PlusPlusParams:
    """G2++ parameters: mean reversions ``a``, ``b`` (per year, > 0), volatilities ``sigma``,
    ``eta`` (absolute, per sqrt year, > 0) and the correlation ``rho`` of the two factor shocks
    (strictly inside (-1, 1)). The model is symmetric under ``(a, sigma) <-> (b, eta)``.

    Implements :class:`pqflow.models.rates.RatesModel` (factors ``x``, ``y`` on the drivers
    ``rates_x``, ``rates_y``)."""

    a: float
    sigma: float
    b: float
    eta: float
    rho: float

    model: ClassVar[str] = "g2pp"
    label: ClassVar[str] = "G2++"
    drivers: ClassVar[tuple[str, ...]] = ("rates_x", "rates_y")
    factor_names: ClassVar[tuple[str, ...]] = ("x", "y")
    #: Two factors, two rate columns: the increments of neither driver are read back.
    recoverable_drivers: ClassVar[tuple[str, ...]] = ()

    def __post_init__(self) -> None:
        for name in ("a", "sigma", "b", "eta", "rho"):
            if not np.isfinite(getattr(self, name)):
                raise ValueError(f"G2++ parameter {name} must be a finite number")
        if not (self.a > 0.0 and self.b > 0.0):
            raise ValueError("G2++ mean reversions a and b must be positive")
        if not (self.sigma > 0.0 and self.eta > 0.0):
            raise ValueError("G2++ volatilities sigma and eta must be positive")
        if not -1.0 < self.rho < 1.0:
            raise ValueError("G2++ correlation rho must lie strictly inside (-1, 1)")

    def swapped(self) -> G2PlusPlusParams:
        """The same model with the factors relabelled: ``(b, eta, a, sigma, rho)``."""
        return G2PlusPlusParams(a=self.b, sigma=self.eta, b=self.a, eta=self.sigma, rho=self.rho)

    # ------------------------------------------------------------- the RatesModel protocol

    def factor_rates(self) -> tuple[tuple[float, float, str], ...]:
        return ((self.a, self.sigma, "rates_x"), (self.b, self.eta, "rates_y"))

    def integrated_variance(self, u: np.ndarray | float) -> np.ndarray:
        return integrated_variance(self, u)

    def short_rate_shift(self, curve: DiscountCurve, t: np.ndarray | float) -> np.ndarray:
        return phi(curve, self, t)

    def bond_exponents(
        self, curve: DiscountCurve, times: np.ndarray, maturities: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        log_a = np.log(zcb_price(curve, self, times[None, :], maturities[:, None], 0.0, 0.0))
        loads = np.stack([b_factor(self.a, maturities), b_factor(self.b, maturities)], axis=1)
        return log_a, loads

    def fixed_correlations(self) -> dict[tuple[str, str], float]:
        return {("rates_x", "rates_y"): self.rho}

    def equity_correlation(self, correlation: Any, *, strict: bool | None) -> tuple[float, float]:
        if np.ndim(correlation) != 1 or len(correlation) != 2:
            raise ValueError(
                "under G2++ rates the equity correlation must be the pair (rho_xS, rho_yS) of "
                f"correlations with the factor shocks W1 and W2, not {correlation!r}"
            )
        rx, ry = (float(c) for c in correlation)
        if strict is None:
            return (rx, ry)
        for label, c in (("rho_xS", rx), ("rho_yS", ry)):
            ok = -1.0 < c < 1.0 if strict else -1.0 <= c <= 1.0
            if not ok:
                where = "strictly inside (-1, 1)" if strict else "in [-1, 1]"
                raise ValueError(f"equity-rate correlation {label} = {c!r} must lie {where}")
        matrix = np.array([[1.0, self.rho, rx], [self.rho, 1.0, ry], [rx, ry, 1.0]])
        least = float(np.linalg.eigvalsh(matrix)[0])
        if (strict and least <= 1e-12) or (not strict and least < -1e-12):
            kind = "positive definite" if strict else "positive semi-definite"
            raise ValueError(
                f"the correlations of (W1, W2, Z) = (rho {self.rho:g}, rho_xS {rx:g}, rho_yS "
                f"{ry:g}) do not form a {kind} matrix"
            )
        return (rx, ry)

    def equity_loadings(self, correlation: Any) -> tuple[tuple[float, float], ...]:
        rx, ry = correlation
        return ((rx * self.sigma, self.a), (ry * self.eta, self.b))

    def describe_with_equity(self, correlation: Any) -> str:
        rx, ry = correlation
        return (
            f"G2++ a {self.a:g}, sigma {self.sigma:g}, b {self.b:g}, eta {self.eta:g}, rho "
            f"{self.rho:g}, equity correlations rho_xS {rx:g} and rho_yS {ry:g}"
        )

    def short_rate_correlation(self, correlation: Any) -> float:
        """``(rho_x sigma + rho_y eta) / sqrt(sigma^2 + eta^2 + 2 rho sigma eta)`` (``dr`` loads
        ``sigma dW1 + eta dW2``)."""
        if not isinstance(correlation, tuple):
            raise ValueError("under G2++ rates an index's correlation with the rates is the pair (rho_xS, rho_yS)")
        s, e = self.sigma, self.eta
        return float((correlation[0] * s + correlation[1] * e) / np.sqrt(s * s + e * e + 2.0 * self.rho * s * e))

    def driver_weights(self) -> tuple[float, float]:
        """``(w_x, w_y)``: the one rates price of risk ``lambda`` (of the short-rate shock) shifts
        ``W1`` by ``w_x lambda`` and ``W2`` by ``w_y lambda`` (:mod:`pqflow.measure.prices_of_risk`)."""
        s, e, rho = self.sigma, self.eta, self.rho
        s_r = float(np.sqrt(s * s + e * e + 2.0 * rho * s * e))
        return (s + rho * e) / s_r, (rho * s + e) / s_r

    def split_price_of_risk(self, lam: float | PiecewiseConstant) -> dict[str, float | PiecewiseConstant]:
        sched = as_schedule(lam)
        return {
            name: PiecewiseConstant(knots=sched.knots, values=tuple(wi * v for v in sched.values))
            for name, wi in zip(self.drivers, self.driver_weights(), strict=True)
        }

    def price_of_risk_weights(self) -> tuple[float, ...]:
        return self.driver_weights()

    def log_bond_constant(self, curve: DiscountCurve, t: np.ndarray, maturity: float) -> np.ndarray:
        """``ln A(t, M)``: ``ln P(t, t + M)`` at ``x = y = 0`` (:func:`zcb_price`)."""
        return np.log(zcb_price(curve, self, t, maturity, 0.0, 0.0))

    def zero_factor_mean(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        z = np.zeros_like(t)
        return (z, z.copy())

    def to_json(self) -> dict[str, Any]:
        return {"g2pp": {"a": self.a, "sigma": self.sigma, "b": self.b, "eta": self.eta, "rho": self.rho}}

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> G2PlusPlusParams:
        return cls(**{k: float(v) for k, v in data.items()})


# --------------------------------------------------------------------------------------------
# Kernel integrals (scalar rates k, c > 0; horizon u any shape, u >= 0)
# --------------------------------------------------------------------------------------------


def _series_coefficients(p: int, q: int, r: int) -> np.ndarray:
    m = np.arange(_TERMS)
    fact = np.array([float(factorial(i)) for i in range(_TERMS + 2)])
    coef = 1.0 / (fact[m + p][:, None] * fact[m + q][None, :] * (m[:, None] + m[None, :] + r))
    coef.flags.writeable = False
    return coef


_POWERS = np.arange(_TERMS)
_COEF_J = _series_coefficients(0, 1, 2)  # J(k, c; u) / u^2
_COEF_K = _series_coefficients(1, 1, 3)  # K(k, c; u) / u^3


def _double_series(k: float, c: float, u: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """``sum_{m,n} coef[m, n] (-k u)^m (-c u)^n`` for ``max(k, c) u < 1``; ``coef[m, n] =
    1 / ((m+p)! (n+q)! (m+n+r))`` (``_COEF_J``: ``p, q, r = 0, 1, 2``; ``_COEF_K``: ``1, 1, 3``)."""
    pk = (-k * u)[:, None] ** _POWERS
    pc = (-c * u)[:, None] ** _POWERS
    return np.einsum("im,mn,in->i", pk, coef, pc)


def _exp_b_one_small(k: float, c: float, u: np.ndarray) -> np.ndarray:
    """``J(k, c; u)`` for ``c u < 1 <= k u``: ``sum_n (-c)^n / (n+1)! M_{n+1}(k, u)`` with the
    moments ``M_j = int_0^u s^j e^{-k s} ds = j! P(j+1, k u) / k^{j+1}`` (regularised lower
    incomplete gamma ``P``), i.e. ``k^{-2} sum_n (-c/k)^n P(n+2, k u)``."""
    n = np.arange(_TERMS)
    terms = (-c / k) ** n * gammainc(n + 2.0, (k * u)[..., None])
    return terms.sum(axis=-1) / k**2


def exp_b_integral(k: float, c: float, u: np.ndarray | float) -> np.ndarray:
    """``J(k, c; u) = int_0^u e^{-k s} B_c(s) ds = [B_k(u) - B_{k+c}(u)] / c``, stable."""
    u = np.asarray(u, dtype=float)
    flat = np.atleast_1d(u).ravel()
    out = np.empty(flat.shape)
    both_small = (k * flat < 1.0) & (c * flat < 1.0)
    one_small = (c * flat < 1.0) & ~both_small
    direct = ~(both_small | one_small)
    if both_small.any():
        v = flat[both_small]
        out[both_small] = v**2 * _double_series(k, c, v, _COEF_J)
    if one_small.any():
        out[one_small] = _exp_b_one_small(k, c, flat[one_small])
    if direct.any():
        v = flat[direct]
        out[direct] = (b_factor(k, v) - b_factor(k + c, v)) / c
    return out.reshape(u.shape)


def b_b_integral(k: float, c: float, u: np.ndarray | float) -> np.ndarray:
    """``K(k, c; u) = int_0^u B_k(s) B_c(s) ds``, stable; with ``h = max(k, c)`` and
    ``l = min(k, c)``, for ``h u >= 1`` it is ``[phi2(l; u) - J(h, l; u)] / h``
    (``int B_l (1 - e^{-h s}) ds / h``, no cancellation)."""
    u = np.asarray(u, dtype=float)
    flat = np.atleast_1d(u).ravel()
    out = np.empty(flat.shape)
    hi, lo = max(k, c), min(k, c)
    small = hi * flat < 1.0
    if small.any():
        v = flat[small]
        out[small] = v**3 * _double_series(k, c, v, _COEF_K)
    if (~small).any():
        v = flat[~small]
        out[~small] = (phi2(lo, v) - exp_b_integral(hi, lo, v)) / hi
    return out.reshape(u.shape)


# --------------------------------------------------------------------------------------------
# Closed forms
# --------------------------------------------------------------------------------------------


def integrated_variance(params: G2PlusPlusParams, u: np.ndarray | float) -> np.ndarray:
    """``V(u)``: variance of ``int_0^u (x_s + y_s) ds`` from ``x_0 = y_0 = 0`` (any shape)."""
    a, s, b, e, rho = params.a, params.sigma, params.b, params.eta, params.rho
    return (
        s**2 * b_b_integral(a, a, u)
        + e**2 * b_b_integral(b, b, u)
        + 2.0 * rho * s * e * b_b_integral(a, b, u)
    )


def phi(curve: DiscountCurve, params: G2PlusPlusParams, t: np.ndarray | float) -> np.ndarray:
    """Deterministic shift ``phi(t) = f(0,t) + V'(t)/2`` that fits today's curve."""
    ba = b_factor(params.a, t)
    bb = b_factor(params.b, t)
    return curve.forward(t) + (
        0.5 * params.sigma**2 * ba**2
        + 0.5 * params.eta**2 * bb**2
        + params.rho * params.sigma * params.eta * ba * bb
    )


def _log_a(curve: DiscountCurve, params: G2PlusPlusParams, t: np.ndarray, m: np.ndarray) -> np.ndarray:
    t, m = np.broadcast_arrays(t, m)
    v_m, v_tm, v_t = integrated_variance(params, np.stack([m, t + m, t]))
    return np.log(curve.discount(t + m)) - np.log(curve.discount(t)) + 0.5 * (v_m - v_tm + v_t)


def zcb_price(
    curve: DiscountCurve,
    params: G2PlusPlusParams,
    t: np.ndarray | float,
    maturity: np.ndarray | float,
    x: np.ndarray | float,
    y: np.ndarray | float,
) -> np.ndarray:
    """``P(t, t + m)`` given the factors ``(x_t, y_t)``; all arguments broadcast together."""
    t = np.asarray(t, dtype=float)
    m = np.asarray(maturity, dtype=float)
    exponent = (
        _log_a(curve, params, t, m)
        - b_factor(params.a, m) * np.asarray(x, dtype=float)
        - b_factor(params.b, m) * np.asarray(y, dtype=float)
    )
    return np.exp(exponent)


def cash_account(
    curve: DiscountCurve,
    params: G2PlusPlusParams,
    t: np.ndarray | float,
    integral: np.ndarray | float,
) -> np.ndarray:
    """``B_t = exp(I_t + V(t)/2) / P(0, t)`` with ``I_t = int_0^t (x + y) ds``."""
    return np.exp(np.asarray(integral) + 0.5 * integrated_variance(params, t)) / curve.discount(t)


@dataclass(frozen=True, kw_only=True)
class ForwardMeasureMoments:
    """Law of ``(x_T, y_T)`` under the ``T``-forward measure: means, standard deviations and
    correlation."""

    mean_x: float
    mean_y: float
    sd_x: float
    sd_y: float
    correlation: float


def forward_measure_moments(params: G2PlusPlusParams, expiry: float) -> ForwardMeasureMoments:
    """Moments of ``(x_T, y_T)`` under the ``T``-forward measure (``T = expiry > 0``)."""
    if not expiry > 0.0:
        raise ValueError("the forward measure needs a positive expiry")
    a, s, b, e, rho = params.a, params.sigma, params.b, params.eta, params.rho
    # Under Q^T: dx = (-a x - sigma^2 B_a(T-t) - rho sigma eta B_b(T-t)) dt + sigma dW1^T, so
    # E^T[x_T] = -int_0^T e^{-a u} [sigma^2 B_a(u) + rho sigma eta B_b(u)] du.
    cross = rho * s * e
    mean_x = -(s**2) * float(exp_b_integral(a, a, expiry)) - cross * float(exp_b_integral(a, b, expiry))
    mean_y = -(e**2) * float(exp_b_integral(b, b, expiry)) - cross * float(exp_b_integral(b, a, expiry))
    sd_x = s * np.sqrt(float(b_factor(2.0 * a, expiry)))
    sd_y = e * np.sqrt(float(b_factor(2.0 * b, expiry)))
    corr = cross * float(b_factor(a + b, expiry)) / (sd_x * sd_y)
    return ForwardMeasureMoments(
        mean_x=mean_x, mean_y=mean_y, sd_x=float(sd_x), sd_y=float(sd_y), correlation=corr
    )


def _check_kind(kind: str, allowed: tuple[str, str]) -> None:
    if kind not in allowed:
        raise ValueError(f"kind must be {allowed[0]!r} or {allowed[1]!r}, not {kind!r}")


def zero_bond_option(
    curve: DiscountCurve,
    params: G2PlusPlusParams,
    *,
    expiry: float,
    bond_maturity: float,
    strike: float,
    kind: str = "call",
) -> float:
    """Price today of a European option expiring at ``expiry`` on the zero bond maturing at
    ``bond_maturity``, strike in bond-price units: Black's formula on ``P(0, S)`` against
    ``X P(0, T)`` with standard deviation ``Sigma``,

        Sigma^2 = sigma^2 B_a(S-T)^2 B_2a(T) + eta^2 B_b(S-T)^2 B_2b(T)
                  + 2 rho sigma eta B_a(S-T) B_b(S-T) B_{a+b}(T)."""
    _check_kind(kind, ("call", "put"))
    if not 0.0 < expiry < bond_maturity:
        raise ValueError("need 0 < expiry < bond_maturity")
    if not strike > 0.0:
        raise ValueError("a zero-bond option needs a positive strike")
    a, s, b, e, rho = params.a, params.sigma, params.b, params.eta, params.rho
    tau = bond_maturity - expiry
    ba, bb = float(b_factor(a, tau)), float(b_factor(b, tau))
    var = (
        s**2 * ba**2 * float(b_factor(2.0 * a, expiry))
        + e**2 * bb**2 * float(b_factor(2.0 * b, expiry))
        + 2.0 * rho * s * e * ba * bb * float(b_factor(a + b, expiry))
    )
    sd = np.sqrt(max(var, 0.0))
    p_t = float(curve.discount(expiry))
    p_s = float(curve.discount(bond_maturity))
    h = np.log(p_s / (p_t * strike)) / sd + 0.5 * sd
    if kind == "call":
        return float(p_s * norm.cdf(h) - strike * p_t * norm.cdf(h - sd))
    return float(strike * p_t * norm.cdf(-h + sd) - p_s * norm.cdf(-h))


def _solve_exercise_level(lam: np.ndarray, beta: np.ndarray, scale: float) -> np.ndarray:
    """Per column ``k``, the ``v`` with ``sum_i lam[i, k] e^{-beta[i] v} = 1``.

    lam: ``(n, K)``, its last row positive; beta: ``(n,)``, increasing and positive. The sum
    has one sign change in its coefficients, so (Descartes' rule for exponential sums) it
    crosses 1 once, from above; safeguarded Newton inside a bracket widened from ``scale``.
    """
    n_cols = lam.shape[1]

    def g(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        terms = lam * np.exp(-beta[:, None] * v[None, :])
        return terms.sum(axis=0) - 1.0, -(beta[:, None] * terms).sum(axis=0)

    lo = np.full(n_cols, -scale)
    hi = np.full(n_cols, scale)
    for _ in range(200):
        glo, _ = g(lo)
        bad = ~(glo > 0.0)
        if not bad.any():
            break
        lo[bad] *= 2.0
    for _ in range(200):
        ghi, _ = g(hi)
        bad = ~(ghi < 0.0)
        if not bad.any():
            break
        hi[bad] *= 2.0
    if not (np.all(g(lo)[0] > 0.0) and np.all(g(hi)[0] < 0.0)):
        raise ValueError("coupon bond option: no exercise level found (check the cash flows)")
    v = 0.5 * (lo + hi)
    for _ in range(100):
        val, der = g(v)
        lo = np.where(val > 0.0, v, lo)
        hi = np.where(val < 0.0, v, hi)
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = v - val / der
        inside = (newton > lo) & (newton < hi) & np.isfinite(newton)
        new_v = np.where(inside, newton, 0.5 * (lo + hi))
        tol = 1e-15 * np.maximum(1.0, np.abs(new_v))
        done = np.all(np.abs(new_v - v) <= tol) or np.all(hi - lo <= tol)
        v = new_v
        if done:
            break
    return v


def coupon_bond_option(
    curve: DiscountCurve,
    params: G2PlusPlusParams,
    *,
    expiry: float,
    payment_times: np.ndarray,
    cash_flows: np.ndarray,
    strike: float = 1.0,
    kind: str = "put",
    n_nodes: int = _DEFAULT_NODES,
    n_sd: float = _DEFAULT_RANGE,
) -> float:
    """European option, expiring at ``expiry``, on the coupon bond paying ``cash_flows`` at
    ``payment_times`` (shapes ``(n,)``, times after ``expiry`` and increasing, last cash flow
    positive), struck at ``strike``. A payer swaption is the put struck at 1 on the coupons
    ``K tau_i`` plus the notional at the end; a receiver swaption is the call.

    Price ``= P(0,T) E^T[(w (X - sum_i c_i P(T, T_i)))^+]`` (``w = +1`` put, ``-1`` call) with
    ``P(T, T_i) = A_i e^{-B_a,i x - B_b,i y}``: integrated over the outer factor ``u`` by the
    trapezoid rule on ``n_nodes`` points within ``n_sd`` standard deviations; given ``u`` the
    inner factor ``v`` is Gaussian (mean ``m(u)``, sd ``s``), the bond crosses the strike at
    ``v_bar(u)``, and with ``h1 = (v_bar - m) / s``, ``lam_i = c_i A_i e^{-B_u,i u} / X``,

        E[(w (X - bond))^+ | u] / X = w [Phi(-w h1) - sum_i lam_i e^{-B_v,i m + B_v,i^2 s^2/2}
                                               Phi(-w (h1 + B_v,i s))].
    """
    _check_kind(kind, ("put", "call"))
    times = np.asarray(payment_times, dtype=float)
    flows = np.asarray(cash_flows, dtype=float)
    if times.ndim != 1 or times.shape != flows.shape or times.size == 0:
        raise ValueError("payment_times and cash_flows must be 1-d arrays of one length")
    if not (expiry > 0.0 and times[0] > expiry and np.all(np.diff(times) > 0.0)):
        raise ValueError("payment times must be increasing and after a positive expiry")
    if not flows[-1] > 0.0:
        raise ValueError("the last cash flow of the coupon bond must be positive")
    if not strike > 0.0:
        raise ValueError("the strike must be positive")
    if n_nodes < 3 or not n_sd > 0.0:
        raise ValueError("need n_nodes >= 3 and n_sd > 0")
    w = 1.0 if kind == "put" else -1.0

    tau = times - expiry
    log_a = _log_a(curve, params, np.asarray(expiry, dtype=float), tau)
    ba, bb = b_factor(params.a, tau), b_factor(params.b, tau)
    fm = forward_measure_moments(params, expiry)
    # outer factor: the one contributing less to the variance of the final bond
    if fm.sd_x * float(ba[-1]) <= fm.sd_y * float(bb[-1]):
        mu_u, sd_u, beta_u, mu_v, sd_v, beta_v = fm.mean_x, fm.sd_x, ba, fm.mean_y, fm.sd_y, bb
    else:
        mu_u, sd_u, beta_u, mu_v, sd_v, beta_v = fm.mean_y, fm.sd_y, bb, fm.mean_x, fm.sd_x, ba
    rho = fm.correlation
    s = sd_v * np.sqrt(1.0 - rho**2)

    z = np.linspace(-n_sd, n_sd, n_nodes)
    weights = np.full(n_nodes, z[1] - z[0])
    weights[[0, -1]] *= 0.5
    weights *= norm.pdf(z)
    u = mu_u + sd_u * z  # (K,)
    m = mu_v + rho * sd_v * z  # conditional mean of v, (K,)
    lam = (flows / strike)[:, None] * np.exp(log_a[:, None] - beta_u[:, None] * u[None, :])  # (n, K)
    v_bar = _solve_exercise_level(lam, beta_v, scale=max(10.0 * sd_v, 0.1))
    h1 = (v_bar - m) / s
    kappa = -beta_v[:, None] * m[None, :] + 0.5 * (beta_v[:, None] * s) ** 2
    inner = ndtr(-w * h1) - np.sum(
        lam * np.exp(kappa) * ndtr(-w * (h1[None, :] + beta_v[:, None] * s)), axis=0
    )
    return float(strike * float(curve.discount(expiry)) * w * np.dot(weights, inner))


def swaption_price(
    curve: DiscountCurve,
    params: G2PlusPlusParams,
    *,
    expiry: float,
    payment_times: np.ndarray,
    accruals: np.ndarray,
    strike: float,
    kind: str = "payer",
    n_nodes: int = _DEFAULT_NODES,
    n_sd: float = _DEFAULT_RANGE,
) -> float:
    """European swaption per unit notional on the fixed leg ``(payment_times, accruals)``
    (shapes ``(n,)``) at rate ``strike``, floating leg at par (worth ``1 - P(T0, Tn)`` at
    expiry): the payer is a put struck at 1 on the coupon bond ``sum_i K tau_i P(T0, T_i) +
    P(T0, Tn)``, the receiver the call (Brigo and Mercurio 2006, eq. 4.31, from memory). The
    final cash flow ``1 + K tau_n`` must be positive."""
    _check_kind(kind, ("payer", "receiver"))
    flows = strike * np.asarray(accruals, dtype=float)
    flows[-1] += 1.0
    return coupon_bond_option(
        curve, params, expiry=expiry, payment_times=payment_times, cash_flows=flows, strike=1.0,
        kind="put" if kind == "payer" else "call", n_nodes=n_nodes, n_sd=n_sd,
    )
