"""Jarrow-Yildirim inflation model: Hull-White nominal and real short rates and a lognormal CPI.

Model (Jarrow and Yildirim, "Pricing Treasury Inflation Protected Securities and Related
Derivatives using an HJM Model", *J. Financial and Quantitative Analysis* 38 (2003); in the
short-rate form of Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed.,
2006, ch. 15.1, equation numbers there from memory). Under the nominal risk-neutral measure Q
(numeraire the nominal cash account ``B_t = exp(int n ds)``), with three correlated drivers
``dW_n dW_r = rho_nr dt``, ``dW_n dW_I = rho_nI dt``, ``dW_r dW_I = rho_rI dt``:

    n_t = x_t + alpha_n(t),   dx = -a_n x dt + sigma_n dW_n,                       x_0 = 0,
    r_t = y_t + alpha_r(t),   dy = (-a_r y - rho_rI sigma_I sigma_r) dt + sigma_r dW_r,  y_0 = 0,
    dI_t / I_t = (n_t - r_t) dt + sigma_I dW_I.

``alpha_n`` fits the nominal curve ``P_n(0, T)`` and ``alpha_r`` the real curve ``P_r(0, T)``
exactly, as in :mod:`pqflow.models.hull_white`: ``y`` is the Hull-White factor of the real rate
under the *real* risk-neutral measure (numeraire ``I_t B^r_t`` in currency), and the term
``-rho_rI sigma_I sigma_r`` is the drift change from that measure to Q (Girsanov with the CPI's
volatility). Consequences (``B_k(u) = (1 - e^{-k u}) / k``, ``V_k`` the Hull-White integrated
variance of each curve's parameters):

    nominal bond  P_n(t, T) = Hull-White bond on (P_n(0, .), a_n, sigma_n) at x_t,
    real bond     P_r(t, T) = Hull-White bond on (P_r(0, .), a_r, sigma_r) at y_t, in CPI units:
                  the bond paying I_T currency at T is worth I_t P_r(t, T) at t,

and ``I_t P_r(t, T) / B_t`` is a Q-martingale, so ``E_Q[I_t / B_t] = I_0 P_r(0, t)``.

The exact transition of this model alone (``JarrowYildirimModel``) is a test oracle in
``tests/oracles/jarrow_yildirim.py``; production simulates inflation as a part of
:class:`pqflow.models.economy.EconomyModel` (:mod:`pqflow.models.inflation`). The transition,
for reference: state ``s = (x, y, X, L)`` with ``X = int_0^t x ds`` and ``L = ln I``. Over a step ``[t0, t1]``
of length ``D`` (``u = t1 - s`` inside the integrals):

    x_1 = e^{-a_n D} x_0 + e_x,                        e_x = sigma_n int e^{-a_n u} dW_n
    y_1 = e^{-a_r D} y_0 - c B_r(D) + e_y,             e_y = sigma_r int e^{-a_r u} dW_r
    X_1 = X_0 + B_n(D) x_0 + e_X,                      e_X = sigma_n int B_n(u) dW_n
    L_1 = L_0 + B_n(D) x_0 - B_r(D) y_0 + int (alpha_n - alpha_r) - sigma_I^2 D / 2
          + c phi2_r(D) + e_X - e_Y + e_I,             e_Y = sigma_r int B_r(u) dW_r,
                                                       e_I = sigma_I int dW_I,

with ``c = rho_rI sigma_I sigma_r``, ``phi2_r(D) = int_0^D B_r``, and
``int alpha_k = ln P_k(0,t0)/P_k(0,t1) + (V_k(t1) - V_k(t0))/2``. Every covariance is the integral
of two loading vectors on ``(W_n, W_r, W_I)`` against the driver correlation (Ito isometry):

    loadings  x: (sigma_n e^{-a_n u}, 0, 0)        y: (0, sigma_r e^{-a_r u}, 0)
              X: (sigma_n B_n(u), 0, 0)            L: (sigma_n B_n(u), -sigma_r B_r(u), sigma_I).

Real world: with ``W^Q = W^P + int lambda ds`` on each correlated driver (prices of risk
``lambda_n``, ``lambda_r``, ``lambda_I``, piecewise constant), each noise gains the mean of its
loadings integrated against the prices of risk; the covariance is unchanged (Girsanov).

Inflation derivatives (period ``[S, T]``, ``tau = T - S``; all in closed form):

* zero-coupon inflation-indexed swap (ZCIIS): the index leg pays ``I_T / I_0 - 1`` at ``T`` and
  is worth ``P_r(0,T) - P_n(0,T)`` whatever the model, so the fair rate is
  ``k(T) = (P_r(0,T) / P_n(0,T))^{1/T} - 1`` (Brigo and Mercurio 2006, ch. 15.2);
* year-on-year forward: ``1 + F(S,T) = E^T[I_T / I_S] = P_n(0,S) P_r(0,T) / (P_n(0,T) P_r(0,S))
  e^{C(S,T)}``, with the convexity term
  ``C = sigma_r B_r(tau) [rho_rI sigma_I B_r(S) - sigma_r B_r(S)^2 / 2 + rho_nr sigma_n J(a_r, a_n; S)]``,
  ``J(k, c; S) = int_0^S e^{-k u} B_c(u) du`` (it follows from the law of ``y_S`` under the nominal
  ``S``-forward measure; Brigo and Mercurio 2006, ch. 15.2, write the same term with
  ``J = [B_r(S)(1 + a_r B_n(S)) - B_n(S)] / (a_n + a_r)``, from memory);
* year-on-year caplet paying ``tau (I_T / I_S - 1 - K)^+`` at ``T``: ``ln(I_T / I_S)`` is Gaussian,
  so its price is Black's formula on ``1 + F`` struck at ``1 + K`` with total variance
  ``v(S, T) = Var ln(I_T / I_S)``, discounted by ``tau P_n(0, T)`` (Jarrow and Yildirim 2003;
  Brigo and Mercurio 2006, ch. 15.2.1, from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.stats import norm

from pqflow.market.curve import DiscountCurve
from pqflow.models.g2pp import b_b_integral, exp_b_integral
from pqflow.models.hull_white import (
    HullWhiteParams,
    alpha,
    b_factor,
    integrated_variance,
    phi2,
    zcb_price,
)
from pqflow.storage.names import CPI, REAL_SHORT_RATE

__all__ = [
    "CPI_COLUMN",
    "REAL_SHORT_RATE_COLUMN",
    "JarrowYildirimParams",
    "real_zcb_price",
    "real_short_rate_shift",
    "zciis_rate",
    "yoy_convexity",
    "yoy_forward",
    "yoy_log_variance",
    "yoy_caplet_price",
    "yoy_cap_price",
    "yoy_swap_rate",
]

CPI_COLUMN = CPI
REAL_SHORT_RATE_COLUMN = REAL_SHORT_RATE


@dataclass(frozen=True, kw_only=True)
class JarrowYildirimParams:
    """Parameters of the Jarrow-Yildirim model.

    nominal: Hull-White ``(a_n, sigma_n)`` of the nominal short rate. real: Hull-White
    ``(a_r, sigma_r)`` of the real short rate. inflation_volatility: ``sigma_I`` of the CPI
    (constant, > 0). correlation_nominal_real, correlation_nominal_inflation,
    correlation_real_inflation: ``rho_nr``, ``rho_nI``, ``rho_rI`` of the driver shocks; together
    they must form a positive definite matrix.
    """

    nominal: HullWhiteParams
    real: HullWhiteParams
    inflation_volatility: float
    correlation_nominal_real: float
    correlation_nominal_inflation: float
    correlation_real_inflation: float

    def __post_init__(self) -> None:
        if not (np.isfinite(self.inflation_volatility) and self.inflation_volatility > 0.0):
            raise ValueError("inflation volatility sigma_I must be a positive number")
        for label in ("nominal_real", "nominal_inflation", "real_inflation"):
            c = getattr(self, f"correlation_{label}")
            if not (np.isfinite(c) and -1.0 < c < 1.0):
                raise ValueError(f"correlation_{label} must lie strictly inside (-1, 1)")
        corr = self.driver_correlation()
        if np.linalg.eigvalsh(corr)[0] <= 1e-12:
            raise ValueError(
                "the correlations of (W_n, W_r, W_I) = (rho_nr "
                f"{self.correlation_nominal_real:g}, rho_nI {self.correlation_nominal_inflation:g}, "
                f"rho_rI {self.correlation_real_inflation:g}) do not form a positive definite matrix"
            )

    def driver_correlation(self) -> np.ndarray:
        """Correlation matrix of ``(W_n, W_r, W_I)``, shape ``(3, 3)``."""
        nr, ni, ri = (
            self.correlation_nominal_real,
            self.correlation_nominal_inflation,
            self.correlation_real_inflation,
        )
        return np.array([[1.0, nr, ni], [nr, 1.0, ri], [ni, ri, 1.0]])


# --------------------------------------------------------------------------------------------
# Closed forms
# --------------------------------------------------------------------------------------------


def real_zcb_price(
    real_curve: DiscountCurve,
    params: JarrowYildirimParams,
    t: np.ndarray | float,
    maturity: np.ndarray | float,
    y: np.ndarray | float,
) -> np.ndarray:
    """Real bond ``P_r(t, t + m)`` in CPI units given the real factor ``y_t`` (broadcast)."""
    return zcb_price(real_curve, params.real, t, maturity, y)


def real_short_rate_shift(
    real_curve: DiscountCurve, params: JarrowYildirimParams, t: np.ndarray | float
) -> np.ndarray:
    """``alpha_r(t) = f_r(0, t) + sigma_r^2 B_r(t)^2 / 2``, so that ``r_t = y_t + alpha_r(t)``."""
    return alpha(real_curve, params.real, t)


def zciis_rate(
    nominal_curve: DiscountCurve, real_curve: DiscountCurve, maturity: np.ndarray | float
) -> np.ndarray:
    """Fair rate (annual compounding) of the zero-coupon inflation-indexed swap maturing at
    ``maturity`` (> 0): ``(P_r(0, T) / P_n(0, T))^{1/T} - 1``; model independent."""
    t = np.asarray(maturity, dtype=float)
    if np.any(~(t > 0.0)):
        raise ValueError("ZCIIS maturities must be positive")
    return (real_curve.discount(t) / nominal_curve.discount(t)) ** (1.0 / t) - 1.0


def _check_period(start: float, end: float) -> None:
    if not (np.isfinite(start) and np.isfinite(end) and 0.0 <= start < end):
        raise ValueError(f"a year-on-year period needs 0 <= start < end, not [{start:g}, {end:g}]")


def yoy_convexity(params: JarrowYildirimParams, *, start: float, end: float) -> float:
    """Convexity term ``C(S, T)`` of the year-on-year forward (module docstring); 0 at ``S = 0``."""
    _check_period(start, end)
    if start == 0.0:
        return 0.0
    an, sn = params.nominal.mean_reversion, params.nominal.volatility
    ar, sr = params.real.mean_reversion, params.real.volatility
    br_s = float(b_factor(ar, start))
    inner = (
        params.correlation_real_inflation * params.inflation_volatility * br_s
        - 0.5 * sr * br_s**2
        + params.correlation_nominal_real * sn * float(exp_b_integral(ar, an, start))
    )
    return float(sr * b_factor(ar, end - start) * inner)


def yoy_forward(
    nominal_curve: DiscountCurve,
    real_curve: DiscountCurve,
    params: JarrowYildirimParams,
    *,
    start: float,
    end: float,
) -> float:
    """Year-on-year forward ``F(S, T) = E^T[I_T / I_S] - 1`` under the nominal ``T``-forward
    measure: the fixed rate that makes ``I_T / I_S - 1 - F`` paid at ``T`` worth nothing."""
    _check_period(start, end)
    ratio = (
        nominal_curve.discount(start) * real_curve.discount(end)
        / (nominal_curve.discount(end) * real_curve.discount(start))
    )
    return float(ratio * np.exp(yoy_convexity(params, start=start, end=end)) - 1.0)


def yoy_log_variance(params: JarrowYildirimParams, *, start: float, end: float) -> float:
    """``v(S, T) = Var ln(I_T / I_S)`` (the same under Q and every forward measure):

        B_n(tau)^2 sigma_n^2 B_2an(S) + B_r(tau)^2 sigma_r^2 B_2ar(S)
          - 2 rho_nr sigma_n sigma_r B_n(tau) B_r(tau) B_{an+ar}(S)          (factors at S)
        + V_n(tau) + V_r(tau) + sigma_I^2 tau - 2 rho_nr sigma_n sigma_r K(a_n, a_r; tau)
          + 2 rho_nI sigma_n sigma_I phi2_n(tau) - 2 rho_rI sigma_r sigma_I phi2_r(tau)   (on [S, T])

    with ``tau = T - S`` and ``K(k, c; u) = int_0^u B_k B_c``."""
    _check_period(start, end)
    p = params
    an, sn = p.nominal.mean_reversion, p.nominal.volatility
    ar, sr = p.real.mean_reversion, p.real.volatility
    si = p.inflation_volatility
    nr, ni, ri = p.correlation_nominal_real, p.correlation_nominal_inflation, p.correlation_real_inflation
    tau = end - start
    bn, br = float(b_factor(an, tau)), float(b_factor(ar, tau))
    at_start = (
        bn**2 * sn**2 * float(b_factor(2.0 * an, start))
        + br**2 * sr**2 * float(b_factor(2.0 * ar, start))
        - 2.0 * nr * sn * sr * bn * br * float(b_factor(an + ar, start))
    )
    in_period = (
        float(integrated_variance(p.nominal, tau))
        + float(integrated_variance(p.real, tau))
        + si**2 * tau
        - 2.0 * nr * sn * sr * float(b_b_integral(an, ar, tau))
        + 2.0 * ni * sn * si * float(phi2(an, tau))
        - 2.0 * ri * sr * si * float(phi2(ar, tau))
    )
    return float(at_start + in_period)


def yoy_caplet_price(
    nominal_curve: DiscountCurve,
    real_curve: DiscountCurve,
    params: JarrowYildirimParams,
    *,
    start: float,
    end: float,
    strike: float,
    kind: str = "cap",
) -> float:
    """Price today, per unit notional, of the year-on-year caplet (``kind="cap"``) paying
    ``tau (I_T / I_S - 1 - K)^+`` at ``T`` or floorlet (``"floor"``) paying
    ``tau (1 + K - I_T / I_S)^+``, ``tau = T - S``: Black's formula on ``1 + F(S, T)`` struck at
    ``1 + K`` with total variance :func:`yoy_log_variance`, times ``tau P_n(0, T)``."""
    _check_period(start, end)
    if kind not in ("cap", "floor"):
        raise ValueError(f"kind must be 'cap' or 'floor', not {kind!r}")
    if not (np.isfinite(strike) and strike > -1.0):
        raise ValueError("a year-on-year strike must exceed -100%")
    tau = end - start
    df = float(nominal_curve.discount(end))
    fwd = 1.0 + yoy_forward(nominal_curve, real_curve, params, start=start, end=end)
    k = 1.0 + strike
    sd = np.sqrt(yoy_log_variance(params, start=start, end=end))
    d1 = np.log(fwd / k) / sd + 0.5 * sd
    d2 = d1 - sd
    if kind == "cap":
        return float(tau * df * (fwd * norm.cdf(d1) - k * norm.cdf(d2)))
    return float(tau * df * (k * norm.cdf(-d2) - fwd * norm.cdf(-d1)))


def _annual_periods(maturity: float) -> np.ndarray:
    n = int(round(maturity))
    if n < 1 or abs(maturity - n) > 1e-9 * max(1.0, maturity):
        raise ValueError(f"a year-on-year cap or swap needs a whole number of years, not {maturity:g}")
    return np.arange(n + 1, dtype=float)


def yoy_cap_price(
    nominal_curve: DiscountCurve,
    real_curve: DiscountCurve,
    params: JarrowYildirimParams,
    *,
    maturity: float,
    strike: float,
    kind: str = "cap",
) -> float:
    """Year-on-year cap (or floor) of ``maturity`` whole years: the sum of the annual caplets on
    ``[i - 1, i]``, ``i = 1 .. maturity`` (the first is a one-year zero-coupon option)."""
    edges = _annual_periods(maturity)
    return float(sum(
        yoy_caplet_price(nominal_curve, real_curve, params, start=float(s), end=float(e),
                         strike=strike, kind=kind)
        for s, e in zip(edges[:-1], edges[1:], strict=True)
    ))


def yoy_swap_rate(
    nominal_curve: DiscountCurve,
    real_curve: DiscountCurve,
    params: JarrowYildirimParams,
    *,
    maturity: float,
) -> float:
    """Par fixed rate of the year-on-year inflation swap of ``maturity`` whole years, annual
    legs ``I_i / I_{i-1} - 1`` against ``K``: ``sum P_n(0, i) F(i-1, i) / sum P_n(0, i)``."""
    edges = _annual_periods(maturity)
    dfs = nominal_curve.discount(edges[1:])
    fwds = np.array([
        yoy_forward(nominal_curve, real_curve, params, start=float(s), end=float(e))
        for s, e in zip(edges[:-1], edges[1:], strict=True)
    ])
    return float(np.sum(dfs * fwds) / np.sum(dfs))
