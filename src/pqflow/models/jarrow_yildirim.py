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

State ``s = (x, y, X, L)`` with ``X = int_0^t x ds`` and ``L = ln I``. Over a step ``[t0, t1]``
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
from pqflow.models.base import StepLaw
from pqflow.models.g2pp import b_b_integral, exp_b_integral
from pqflow.models.hull_white import (
    HullWhiteParams,
    alpha,
    b_factor,
    cash_account,
    integrated_variance,
    phi2,
    zcb_price,
)
from pqflow.models.hull_white_equity import bond_column
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments

__all__ = [
    "CPI_COLUMN",
    "REAL_SHORT_RATE_COLUMN",
    "real_bond_column",
    "JarrowYildirimParams",
    "InflationPricesOfRisk",
    "JarrowYildirimModel",
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

CPI_COLUMN = "cpi"
REAL_SHORT_RATE_COLUMN = "real_short_rate"


def real_bond_column(maturity: float) -> str:
    """Column name of the real zero-coupon bond with ``maturity`` years to run: ``real_zcb_10y``."""
    return f"real_zcb_{maturity:g}y"


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


@dataclass(frozen=True, kw_only=True)
class InflationPricesOfRisk:
    """Market prices of risk per square-root year on the three correlated drivers, each a number
    or piecewise constant in time: ``nominal`` on ``W_n``, ``real`` on ``W_r``, ``inflation`` on
    ``W_I``, with ``W^Q = W^P + int lambda ds``. Under P the CPI then grows at
    ``n - r + sigma_I lambda_I`` (an inflation risk premium ``sigma_I lambda_I``) and the real
    factor's drift is its nominal-Q drift plus ``sigma_r lambda_r``."""

    nominal: float | PiecewiseConstant
    real: float | PiecewiseConstant
    inflation: float | PiecewiseConstant

    @property
    def nominal_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.nominal)

    @property
    def real_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.real)

    @property
    def inflation_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.inflation)


def _kernels(k: float, t1: float, u0: float, u1: float) -> tuple[float, float]:
    """``int_{u0}^{u1} e^{-k (t1 - s)} ds`` and ``int_{u0}^{u1} B_k(t1 - s) ds``."""
    e = float(b_factor(k, t1 - u0) - b_factor(k, t1 - u1))
    i = float(phi2(k, t1 - u0) - phi2(k, t1 - u1))
    return e, i


def _int_alpha(curve: DiscountCurve, params: HullWhiteParams, t0: float, t1: float) -> float:
    """``int_{t0}^{t1} alpha(s) ds = ln P(0,t0)/P(0,t1) + (V(t1) - V(t0))/2``."""
    return float(
        np.log(curve.discount(t0) / curve.discount(t1))
        + 0.5 * (integrated_variance(params, t1) - integrated_variance(params, t0))
    )


@dataclass(frozen=True, kw_only=True)
class JarrowYildirimModel:
    """Nominal and real Hull-White rates and a CPI index (a ``ScenarioModel``).

    nominal_curve, real_curve: today's ``P_n(0, .)`` and ``P_r(0, .)`` (the real curve, e.g. from
    zero-coupon inflation swaps, :mod:`pqflow.calibration.inflation`); both must reach the
    horizon plus the longest bond maturity. bond_maturities, real_bond_maturities: the nominal
    and real zero-coupon bonds to publish. cpi_base: index level at time 0.
    """

    nominal_curve: DiscountCurve
    real_curve: DiscountCurve
    params: JarrowYildirimParams
    prices_of_risk: InflationPricesOfRisk
    bond_maturities: tuple[float, ...]
    real_bond_maturities: tuple[float, ...]
    cpi_base: float = 1.0

    def __post_init__(self) -> None:
        if not (np.isfinite(self.cpi_base) and self.cpi_base > 0.0):
            raise ValueError("cpi_base must be a positive number")
        if any(not m > 0.0 for m in (*self.bond_maturities, *self.real_bond_maturities)):
            raise ValueError("bond maturities must be positive")

    @property
    def state_names(self) -> tuple[str, ...]:
        return ("x_nominal", "x_real", "integral_x_nominal", "log_cpi")

    def initial_state(self) -> np.ndarray:
        return np.array([0.0, 0.0, 0.0, np.log(self.cpi_base)])

    def step_covariance(self, t0: float, t1: float) -> np.ndarray:
        """Covariance of the noise of ``(x, y, X, L)`` over ``[t0, t1]``, shape ``(4, 4)``."""
        p = self.params
        an, sn = p.nominal.mean_reversion, p.nominal.volatility
        ar, sr = p.real.mean_reversion, p.real.volatility
        si = p.inflation_volatility
        nr, ni, ri = (
            p.correlation_nominal_real,
            p.correlation_nominal_inflation,
            p.correlation_real_inflation,
        )
        d = t1 - t0
        bn, br = float(b_factor(an, d)), float(b_factor(ar, d))
        vxx = sn**2 * float(b_factor(2.0 * an, d))
        vyy = sr**2 * float(b_factor(2.0 * ar, d))
        vxy = nr * sn * sr * float(b_factor(an + ar, d))
        cxX = 0.5 * sn**2 * bn**2  # int e^{-a u} B(u) du = B(D)^2 / 2
        cyX = nr * sr * sn * float(exp_b_integral(ar, an, d))
        vXX = float(integrated_variance(p.nominal, d))
        cxL = cxX - nr * sn * sr * float(exp_b_integral(an, ar, d)) + ni * sn * si * bn
        cyL = cyX - 0.5 * sr**2 * br**2 + ri * sr * si * br
        knr = float(b_b_integral(an, ar, d))
        cXL = vXX - nr * sn * sr * knr + ni * sn * si * float(phi2(an, d))
        vLL = (
            vXX
            + float(integrated_variance(p.real, d))
            + si**2 * d
            - 2.0 * nr * sn * sr * knr
            + 2.0 * ni * sn * si * float(phi2(an, d))
            - 2.0 * ri * sr * si * float(phi2(ar, d))
        )
        return np.array(
            [
                [vxx, vxy, cxX, cxL],
                [vxy, vyy, cyX, cyL],
                [cxX, cyX, vXX, cXL],
                [cxL, cyL, cXL, vLL],
            ]
        )

    def step_law(self, t0: float, t1: float) -> StepLaw:
        d = t1 - t0
        if not d > 0.0:
            raise ValueError("a step must have positive length")
        p = self.params
        an, sn = p.nominal.mean_reversion, p.nominal.volatility
        ar, sr = p.real.mean_reversion, p.real.volatility
        si = p.inflation_volatility
        bn, br = float(b_factor(an, d)), float(b_factor(ar, d))
        c = p.correlation_real_inflation * si * sr
        transition = np.array(
            [
                [np.exp(-an * d), 0.0, 0.0, 0.0],
                [0.0, np.exp(-ar * d), 0.0, 0.0],
                [bn, 0.0, 1.0, 0.0],
                [bn, -br, 0.0, 1.0],
            ]
        )
        drift_l = (
            _int_alpha(self.nominal_curve, p.nominal, t0, t1)
            - _int_alpha(self.real_curve, p.real, t0, t1)
            - 0.5 * si**2 * d
            + c * float(phi2(ar, d))
        )
        drift = np.array([0.0, -c * br, 0.0, drift_l])
        m_x = m_y = m_X = m_Y = m_I = 0.0
        pieces = segments(
            t0, t1, self.prices_of_risk.nominal_schedule, self.prices_of_risk.real_schedule,
            self.prices_of_risk.inflation_schedule,
        )
        for u0, u1, (lam_n, lam_r, lam_i) in pieces:
            en, i_n = _kernels(an, t1, u0, u1)
            er, i_r = _kernels(ar, t1, u0, u1)
            m_x += sn * lam_n * en
            m_y += sr * lam_r * er
            m_X += sn * lam_n * i_n
            m_Y += sr * lam_r * i_r
            m_I += si * lam_i * (u1 - u0)
        shift = np.array([m_x, m_y, m_X, m_X - m_Y + m_I])
        chol = np.linalg.cholesky(self.step_covariance(t0, t1))
        return StepLaw(transition=transition, drift=drift, chol=chol, real_world_shift=shift)

    def _known_columns(self) -> tuple[str, ...]:
        return (
            "short_rate",
            "cash_account",
            *(bond_column(m) for m in self.bond_maturities),
            CPI_COLUMN,
            REAL_SHORT_RATE_COLUMN,
            *(real_bond_column(m) for m in self.real_bond_maturities),
        )

    def columns(
        self, times: np.ndarray, states: np.ndarray, names: tuple[str, ...] | None = None
    ) -> dict[str, np.ndarray]:
        """Output columns ``(n_paths, n_times)`` from states ``(n_paths, n_times, 4)``: all of
        them, or only ``names``. Nominal bonds ``P_n(t, t+m) = A_n(t, m) e^{-B_n(m) x_t}``, real
        bonds ``P_r(t, t+m) = A_r(t, m) e^{-B_r(m) y_t}`` (in CPI units), with the deterministic
        ``A`` computed once per time and maturity; ``B_t = e^{X_t} B_t|_{X=0}``; ``cpi = e^L``."""
        times = np.asarray(times, dtype=float)
        known = self._known_columns()
        wanted = known if names is None else tuple(names)
        unknown = [c for c in wanted if c not in known]
        if unknown:
            raise ValueError(f"unknown output columns {unknown}")
        p = self.params
        x = states[:, :, 0]
        y = states[:, :, 1]
        out: dict[str, np.ndarray] = {}
        if "short_rate" in wanted:
            out["short_rate"] = x + alpha(self.nominal_curve, p.nominal, times)[None, :]
        if "cash_account" in wanted:
            cash = np.exp(states[:, :, 2])
            cash *= cash_account(self.nominal_curve, p.nominal, times, 0.0)[None, :]
            out["cash_account"] = cash
        if REAL_SHORT_RATE_COLUMN in wanted:
            out[REAL_SHORT_RATE_COLUMN] = y + real_short_rate_shift(self.real_curve, p, times)[None, :]
        if CPI_COLUMN in wanted:
            out[CPI_COLUMN] = np.exp(states[:, :, 3])
        for column, maturities, curve, hw, factor in (
            (bond_column, self.bond_maturities, self.nominal_curve, p.nominal, x),
            (real_bond_column, self.real_bond_maturities, self.real_curve, p.real, y),
        ):
            chosen = [(column(m), m) for m in maturities if column(m) in wanted]
            if not chosen:
                continue
            mats = np.array([m for _, m in chosen])
            a_factor = zcb_price(curve, hw, times[None, :], mats[:, None], 0.0)
            b = b_factor(hw.mean_reversion, mats)
            for i, (name, _) in enumerate(chosen):
                out[name] = np.exp(-b[i] * factor) * a_factor[i][None, :]
        return {c: out[c] for c in wanted}

    def column_units(self) -> dict[str, str]:
        units = {
            "short_rate": "nominal, per year, continuously compounded",
            "cash_account": "currency units per unit invested at time 0 (nominal cash account)",
        }
        for m in self.bond_maturities:
            units[bond_column(m)] = f"price of a nominal zero-coupon bond paying 1 at time + {m:g} years"
        units[CPI_COLUMN] = f"consumer price index level ({self.cpi_base:g} at time 0)"
        units[REAL_SHORT_RATE_COLUMN] = "real, per year, continuously compounded"
        for m in self.real_bond_maturities:
            units[real_bond_column(m)] = (
                f"price in index units of a real zero-coupon bond paying cpi(time + {m:g} years) "
                "currency units then; its currency price is cpi times this value"
            )
        return units


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
