"""Test oracle: G2++ two-factor rates with one equity total-return index, exact joint
transition and the equity option closed form written out for this one pair (independently of
the economy model's kernels and of :mod:`pqflow.models.equity`).

The production model is :class:`pqflow.models.economy.EconomyModel`; tests check it against
this class to rounding, and this class against quadrature and Monte Carlo
(tests/test_g2pp_transition.py).

Rates as in :mod:`pqflow.models.g2pp` (``r = x + y + phi(t)``); the index follows
``d ln S = (r - sigma_S(t)^2 / 2) dt + sigma_S(t) dZ`` with three correlated drivers

    dW1 dW2 = rho dt,   dW1 dZ = rho_xS dt,   dW2 dZ = rho_yS dt,

whose correlation matrix must be positive definite. State ``s = (x, y, I, L)`` with
``I = int_0^t (x + y) ds`` and ``L = ln S``. Over a step ``[t0, t1]`` of length ``D``
(``u = t1 - s`` below; Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed.,
2006, ch. 4.2 for the rate part):

    x_1 = e^{-aD} x_0 + e_x,                     e_x = sigma int e^{-a u} dW1
    y_1 = e^{-bD} y_0 + e_y,                     e_y = eta   int e^{-b u} dW2
    I_1 = I_0 + B_a(D) x_0 + B_b(D) y_0 + e_I,   e_I = sigma int B_a(u) dW1 + eta int B_b(u) dW2
    L_1 = L_0 + B_a(D) x_0 + B_b(D) y_0 + int_{t0}^{t1} phi ds - int sigma_S^2 / 2 ds + e_I + e_S,
                                                 e_S = int sigma_S dZ

with ``int phi = ln P(0,t0)/P(0,t1) + (V(t1) - V(t0))/2`` and, by the Ito isometry,

    Var e_x = sigma^2 B_2a(D),   Var e_y = eta^2 B_2b(D),   Cov(e_x, e_y) = rho sigma eta B_{a+b}(D),
    Cov(e_x, e_I) = sigma^2 J(a, a; D) + rho sigma eta J(a, b; D),
    Cov(e_y, e_I) = eta^2 J(b, b; D) + rho sigma eta J(b, a; D),      Var e_I = V(D),
    Cov(e_x, e_S) = rho_xS sigma int sigma_S e^{-a u},   Cov(e_y, e_S) = rho_yS eta int sigma_S e^{-b u},
    Cov(e_I, e_S) = int sigma_S [rho_xS sigma B_a(u) + rho_yS eta B_b(u)],   Var e_S = int sigma_S^2,

``J(k, c; D) = int_0^D e^{-k u} B_c(u) du``; the equity integrals run over the pieces of the
piecewise-constant ``sigma_S`` inside the step.

Real world: with ``W^Q = W^P + int lambda ds`` on each correlated driver (prices of risk
``lambda_x``, ``lambda_y``, ``lambda_S``, piecewise constant), the noises gain the means
``sigma int lambda_x e^{-a u}``, ``eta int lambda_y e^{-b u}``,
``int [sigma lambda_x B_a(u) + eta lambda_y B_b(u)]`` and ``int sigma_S lambda_S``: the same
kernels integrated against the prices of risk. The covariance is unchanged (Girsanov).

Output columns are named as those of :class:`oracles.hull_white_equity.HullWhiteEquityModel`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from oracles.hull_white_equity import rates_equity_units
from pqflow.market.curve import DiscountCurve
from pqflow.models.base import StepLaw
from pqflow.models.equity import black_on_forward
from pqflow.models.g2pp import (
    G2PlusPlusParams,
    cash_account,
    exp_b_integral,
    integrated_variance,
    phi,
    zcb_price,
)
from pqflow.models.hull_white import b_factor, phi2
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments
from pqflow.storage.names import bond_column, equity_column

__all__ = [
    "G2PricesOfRisk",
    "G2EquityParams",
    "G2PlusPlusEquityModel",
    "driver_correlation",
    "real_world_factor_means",
    "expected_short_rate",
    "equity_total_variance",
    "equity_option_price",
]


@dataclass(frozen=True, kw_only=True)
class G2PricesOfRisk:
    """Market prices of risk per square-root year on the three correlated drivers, each a
    number or piecewise constant in time: ``x`` on ``W1``, ``y`` on ``W2``, ``equity`` on ``Z``."""

    x: float | PiecewiseConstant
    y: float | PiecewiseConstant
    equity: float | PiecewiseConstant

    @property
    def x_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.x)

    @property
    def y_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.y)

    @property
    def equity_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.equity)


@dataclass(frozen=True, kw_only=True)
class G2EquityParams:
    """One total-return index under G2++ rates: ``level`` at time 0, ``dividend_yield`` q
    (continuous; used for options on the price index ``S_t e^{-q t}``), ``volatility`` sigma_S (a
    number, or piecewise constant in time) and the correlations ``correlation_x``,
    ``correlation_y`` of the equity shock with the factor shocks ``W1`` and ``W2``."""

    name: str
    level: float
    dividend_yield: float
    volatility: float | PiecewiseConstant
    correlation_x: float
    correlation_y: float

    def __post_init__(self) -> None:
        if not self.level > 0.0:
            raise ValueError("equity level must be positive")
        if not all(v > 0.0 for v in self.vol_schedule.values):
            raise ValueError("equity volatility must be positive")
        for label, c in (("x", self.correlation_x), ("y", self.correlation_y)):
            if not -1.0 < c < 1.0:
                raise ValueError(f"equity correlation with factor {label} must lie strictly inside (-1, 1)")

    @property
    def vol_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.volatility)


def driver_correlation(rates: G2PlusPlusParams, equity: G2EquityParams) -> np.ndarray:
    """Correlation matrix of ``(W1, W2, Z)``, shape ``(3, 3)``; raises ``ValueError`` unless it
    is positive definite."""
    rho, rx, ry = rates.rho, equity.correlation_x, equity.correlation_y
    corr = np.array([[1.0, rho, rx], [rho, 1.0, ry], [rx, ry, 1.0]])
    if np.linalg.eigvalsh(corr)[0] <= 1e-12:
        raise ValueError(
            f"the correlations of (W1, W2, Z) = (rho {rho:g}, rho_xS {rx:g}, rho_yS {ry:g}) do "
            "not form a positive definite matrix"
        )
    return corr


def _kernel_increments(k: float, t1: float, u0: float, u1: float) -> tuple[float, float]:
    """``int_{u0}^{u1} e^{-k (t1 - s)} ds`` and ``int_{u0}^{u1} B_k(t1 - s) ds``."""
    e = float(b_factor(k, t1 - u0) - b_factor(k, t1 - u1))
    i = float(phi2(k, t1 - u0) - phi2(k, t1 - u1))
    return e, i


@dataclass(frozen=True, kw_only=True)
class G2PlusPlusEquityModel:
    """G2++ rates fitted to ``curve`` and one equity total-return index (a ``ScenarioModel``)."""

    curve: DiscountCurve
    rates: G2PlusPlusParams
    equity: G2EquityParams
    prices_of_risk: G2PricesOfRisk
    bond_maturities: tuple[float, ...]

    def __post_init__(self) -> None:
        driver_correlation(self.rates, self.equity)
        if any(not m > 0.0 for m in self.bond_maturities):
            raise ValueError("bond maturities must be positive")

    @property
    def state_names(self) -> tuple[str, ...]:
        return ("x", "y", "integral_xy", "log_equity")

    def initial_state(self) -> np.ndarray:
        return np.array([0.0, 0.0, 0.0, np.log(self.equity.level)])

    def step_covariance(self, t0: float, t1: float) -> np.ndarray:
        """Covariance of the noise of ``(x, y, I, L)`` over ``[t0, t1]``, shape ``(4, 4)``."""
        p = self.rates
        a, s, b, e, rho = p.a, p.sigma, p.b, p.eta, p.rho
        rx, ry = self.equity.correlation_x, self.equity.correlation_y
        dt = t1 - t0
        vxx = s**2 * float(b_factor(2.0 * a, dt))
        vyy = e**2 * float(b_factor(2.0 * b, dt))
        vxy = rho * s * e * float(b_factor(a + b, dt))
        cxi = s**2 * float(exp_b_integral(a, a, dt)) + rho * s * e * float(exp_b_integral(a, b, dt))
        cyi = e**2 * float(exp_b_integral(b, b, dt)) + rho * s * e * float(exp_b_integral(b, a, dt))
        vii = float(integrated_variance(p, dt))
        cxs = cys = cis = vss = 0.0
        for u0, u1, (vol,) in segments(t0, t1, self.equity.vol_schedule):
            ea, ia = _kernel_increments(a, t1, u0, u1)
            eb, ib = _kernel_increments(b, t1, u0, u1)
            cxs += rx * s * vol * ea
            cys += ry * e * vol * eb
            cis += vol * (rx * s * ia + ry * e * ib)
            vss += vol**2 * (u1 - u0)
        return np.array(
            [
                [vxx, vxy, cxi, cxi + cxs],
                [vxy, vyy, cyi, cyi + cys],
                [cxi, cyi, vii, vii + cis],
                [cxi + cxs, cyi + cys, vii + cis, vii + 2.0 * cis + vss],
            ]
        )

    def step_law(self, t0: float, t1: float) -> StepLaw:
        dt = t1 - t0
        if not dt > 0.0:
            raise ValueError("a step must have positive length")
        p = self.rates
        a, s, b, e = p.a, p.sigma, p.b, p.eta
        ba, bb = float(b_factor(a, dt)), float(b_factor(b, dt))
        int_phi = float(
            np.log(self.curve.discount(t0) / self.curve.discount(t1))
            + 0.5 * (integrated_variance(p, t1) - integrated_variance(p, t0))
        )
        transition = np.array(
            [
                [np.exp(-a * dt), 0.0, 0.0, 0.0],
                [0.0, np.exp(-b * dt), 0.0, 0.0],
                [ba, bb, 1.0, 0.0],
                [ba, bb, 0.0, 1.0],
            ]
        )
        half_var = 0.0
        m_x = m_y = m_i = m_s = 0.0
        pieces = segments(
            t0, t1, self.equity.vol_schedule, self.prices_of_risk.x_schedule,
            self.prices_of_risk.y_schedule, self.prices_of_risk.equity_schedule,
        )
        for u0, u1, (vol, lam_x, lam_y, lam_s) in pieces:
            ea, ia = _kernel_increments(a, t1, u0, u1)
            eb, ib = _kernel_increments(b, t1, u0, u1)
            half_var += 0.5 * vol**2 * (u1 - u0)
            m_x += s * lam_x * ea
            m_y += e * lam_y * eb
            m_i += s * lam_x * ia + e * lam_y * ib
            m_s += vol * lam_s * (u1 - u0)
        drift = np.array([0.0, 0.0, 0.0, int_phi - half_var])
        shift = np.array([m_x, m_y, m_i, m_i + m_s])
        chol = np.linalg.cholesky(self.step_covariance(t0, t1))
        return StepLaw(transition=transition, drift=drift, chol=chol, real_world_shift=shift)

    def columns(
        self, times: np.ndarray, states: np.ndarray, names: tuple[str, ...] | None = None
    ) -> dict[str, np.ndarray]:
        """Output columns ``(n_paths, n_times)`` from states ``(n_paths, n_times, 4)``: all of
        them, or only ``names``. ``P(t, t+m) = A(t, m) e^{-B_a(m) x_t - B_b(m) y_t}`` with the
        deterministic ``A(t, m)`` computed once per time and maturity, and
        ``B_t = e^{I_t} B_t|_{I=0}``."""
        times = np.asarray(times, dtype=float)
        bonds = {bond_column(m): m for m in self.bond_maturities}
        equity = equity_column(self.equity.name)
        known = ("short_rate", "cash_account", *bonds, equity)
        wanted = known if names is None else tuple(names)
        unknown = [c for c in wanted if c not in known]
        if unknown:
            raise ValueError(f"unknown output columns {unknown}")
        x = states[:, :, 0]
        y = states[:, :, 1]
        out: dict[str, np.ndarray] = {}
        if "short_rate" in wanted:
            out["short_rate"] = x + y + phi(self.curve, self.rates, times)[None, :]
        if "cash_account" in wanted:
            cash = np.exp(states[:, :, 2])
            cash *= cash_account(self.curve, self.rates, times, 0.0)[None, :]
            out["cash_account"] = cash
        bond_names = [c for c in wanted if c in bonds]
        if bond_names:
            maturities = np.array([bonds[c] for c in bond_names])
            a_factor = zcb_price(self.curve, self.rates, times[None, :], maturities[:, None], 0.0, 0.0)
            ba = b_factor(self.rates.a, maturities)
            bb = b_factor(self.rates.b, maturities)
            for i, c in enumerate(bond_names):
                out[c] = np.exp(-ba[i] * x - bb[i] * y) * a_factor[i][None, :]
        if equity in wanted:
            out[equity] = np.exp(states[:, :, 3])
        return {c: out[c] for c in wanted}

    def column_units(self) -> dict[str, str]:
        return rates_equity_units(self.bond_maturities, self.equity.name)


def real_world_factor_means(
    rates: G2PlusPlusParams, prices_of_risk: G2PricesOfRisk, t: np.ndarray | float
) -> tuple[np.ndarray, np.ndarray]:
    """``(E_P[x_t], E_P[y_t])`` from ``x_0 = y_0 = 0``: ``sigma int_0^t lambda_x(s) e^{-a (t-s)} ds``
    and ``eta int_0^t lambda_y(s) e^{-b (t-s)} ds`` (both zero under Q); any shape of ``t``."""
    t_arr = np.atleast_1d(np.asarray(t, dtype=float))
    mx = np.zeros(t_arr.shape)
    my = np.zeros(t_arr.shape)
    schedules = (prices_of_risk.x_schedule, prices_of_risk.y_schedule)
    for i, ti in np.ndenumerate(t_arr):
        if ti > 0.0:
            for u0, u1, (lx, ly) in segments(0.0, float(ti), *schedules):
                ea, _ = _kernel_increments(rates.a, float(ti), u0, u1)
                eb, _ = _kernel_increments(rates.b, float(ti), u0, u1)
                mx[i] += rates.sigma * lx * ea
                my[i] += rates.eta * ly * eb
    return mx.reshape(np.shape(t)), my.reshape(np.shape(t))


def expected_short_rate(
    curve: DiscountCurve,
    rates: G2PlusPlusParams,
    prices_of_risk: G2PricesOfRisk,
    t: np.ndarray | float,
    *,
    measure: str,
) -> np.ndarray:
    """Closed-form expected short rate at ``t``: ``phi(t)`` under Q, plus the factor means
    under P."""
    base = phi(curve, rates, t)
    if measure == "market_consistent":
        return base
    if measure == "real_world":
        mx, my = real_world_factor_means(rates, prices_of_risk, t)
        return base + mx + my
    raise ValueError(f"unknown measure {measure!r}")


def equity_total_variance(rates: G2PlusPlusParams, equity: G2EquityParams, expiry: float) -> float:
    """Variance of ``ln(S_T / P(T, T))`` under the ``T``-forward measure,

        int_0^T [sigma_S^2 + 2 sigma_S (rho_xS sigma B_a(T-u) + rho_yS eta B_b(T-u))] du + V(T)

    (the martingale part of ``d ln(S_t / P(t, T))`` is ``sigma_S dZ + sigma B_a dW1 + eta B_b
    dW2``, from ``dP/P = r dt - sigma B_a dW1 - eta B_b dW2``)."""
    if not expiry > 0.0:
        raise ValueError("expiry must be positive")
    a, s, b, e = rates.a, rates.sigma, rates.b, rates.eta
    rx, ry = equity.correlation_x, equity.correlation_y
    total = float(integrated_variance(rates, expiry))
    for u0, u1, (vol,) in segments(0.0, expiry, equity.vol_schedule):
        _, ia = _kernel_increments(a, expiry, u0, u1)
        _, ib = _kernel_increments(b, expiry, u0, u1)
        total += vol**2 * (u1 - u0) + 2.0 * vol * (rx * s * ia + ry * e * ib)
    return total


def equity_option_price(
    curve: DiscountCurve,
    rates: G2PlusPlusParams,
    equity: G2EquityParams,
    *,
    expiry: float,
    strike: float,
    kind: str = "call",
) -> float:
    """European option on the price index ``S_T e^{-q T}``: Black's formula on the forward
    ``S_0 e^{-q T} / P(0, T)`` with :func:`equity_total_variance`, discounted by ``P(0, T)``."""
    if not expiry > 0.0 or not strike > 0.0:
        raise ValueError("expiry and strike must be positive")
    df = float(curve.discount(expiry))
    forward = equity.level * np.exp(-equity.dividend_yield * expiry) / df
    return black_on_forward(df, forward, strike, equity_total_variance(rates, equity, expiry), kind)
