"""Test oracle: Hull-White one-factor rates with one equity total-return index, exact joint
transition written out for this one pair (independently of the economy model's kernels).

The production model is :class:`pqflow.models.economy.EconomyModel`; tests check it against
this class to rounding, and this class against QuantLib (tests/test_equity_option.py,
tests/test_transition.py).

State ``s = (x, I, L)``: the Hull-White factor, its time integral ``I = int x ds`` and the log
equity index ``L = ln S``. Over a step of length ``D`` from ``t0`` (Brigo and Mercurio 2006,
ch. 3.3; the equity terms follow from ``d ln S = (r - sigma_S^2/2) dt + sigma_S dZ``):

    x_1 = e^{-aD} x_0 + e1
    I_1 = I_0 + B(D) x_0 + e2
    L_1 = L_0 + B(D) x_0 + int_{t0}^{t1} alpha ds - sigma_S^2 D / 2 + e2 + e3

with ``int alpha = ln P(0,t0)/P(0,t1) + (V(t1) - V(t0))/2`` and the jointly Gaussian

    Var e1 = sigma^2 (1 - e^{-2aD}) / (2a),   Cov(e1, e2) = sigma^2 B(D)^2 / 2,   Var e2 = V(D),
    Cov(e1, e3) = rho sigma sigma_S B(D),     Cov(e2, e3) = rho sigma sigma_S (D - B(D)) / a,
    Var e3 = sigma_S^2 D.

Under the real-world measure the noises gain the means
``(sigma l_r B(D), sigma l_r (D - B(D))/a, ... + sigma_S l_S D)``: the integrals of each kernel
against the prices of risk ``l_r`` (rates) and ``l_S`` (equity). Equity volatility and prices of
risk may be piecewise constant in time; each step then integrates over the pieces it covers.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models.base import StepLaw
from pqflow.models.hull_white import (
    HullWhiteParams,
    alpha,
    b_factor,
    cash_account,
    integrated_variance,
    phi2,
    zcb_price,
)
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments
from pqflow.models.total_return import TotalReturnIndex
from pqflow.storage.names import bond_column, equity_column

__all__ = ["HullWhiteEquityModel", "HullWhitePricesOfRisk", "bond_column", "equity_column", "rates_equity_units"]


def rates_equity_units(bond_maturities: tuple[float, ...], equity_name: str) -> dict[str, str]:
    """Units of the columns every rates-plus-equity model writes."""
    units = {
        "short_rate": "per year, continuously compounded",
        "cash_account": "currency units per unit invested at time 0",
    }
    for m in bond_maturities:
        units[bond_column(m)] = f"price of a zero-coupon bond paying 1 at time + {m:g} years"
    units[equity_column(equity_name)] = "total-return index level (dividends reinvested)"
    return units



@dataclass(frozen=True, kw_only=True)
class HullWhitePricesOfRisk:
    """The two prices of risk of the single-part model: ``rates`` on the short-rate shock,
    ``equity`` on the index's shock (the library holds an index's per driver)."""

    rates: float | PiecewiseConstant
    equity: float | PiecewiseConstant

    @property
    def rates_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.rates)

    @property
    def equity_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.equity)


@dataclass(frozen=True, kw_only=True)
class HullWhiteEquityModel:
    """The core pair: Hull-White one-factor rates fitted to ``curve`` and one equity index."""

    curve: DiscountCurve
    rates: HullWhiteParams
    equity: TotalReturnIndex
    prices_of_risk: HullWhitePricesOfRisk
    bond_maturities: tuple[float, ...]

    @property
    def state_names(self) -> tuple[str, ...]:
        return ("x", "integral_x", "log_equity")

    def initial_state(self) -> np.ndarray:
        return np.array([0.0, 0.0, np.log(self.equity.level)])

    def step_covariance(self, t0: float, t1: float) -> np.ndarray:
        """Covariance of ``(e1, e2, e2 + e3)``, the noise of ``(x, I, L)`` over ``[t0, t1]``,
        shape ``(3, 3)``; the equity terms integrate a piecewise-constant ``sigma_S`` over the
        pieces of the step: ``Cov(e1, e3) = rho sigma sum sigma_S,j [B(t1-u0) - B(t1-u1)]``,
        ``Cov(e2, e3) = rho sigma sum sigma_S,j [phi2(t1-u0) - phi2(t1-u1)]``,
        ``Var e3 = sum sigma_S,j^2 (u1 - u0)``."""
        a, s = self.rates.mean_reversion, self.rates.volatility
        rho = self.equity.correlation
        dt = t1 - t0
        b = float(b_factor(a, dt))
        v11 = s**2 * float(b_factor(2.0 * a, dt))
        v12 = 0.5 * s**2 * b**2
        v22 = float(integrated_variance(self.rates, dt))
        c13 = c23 = v33 = 0.0
        for u0, u1, (vol,) in segments(t0, t1, self.equity.vol_schedule):
            c13 += rho * s * vol * float(b_factor(a, t1 - u0) - b_factor(a, t1 - u1))
            c23 += rho * s * vol * float(phi2(a, t1 - u0) - phi2(a, t1 - u1))
            v33 += vol**2 * (u1 - u0)
        return np.array(
            [
                [v11, v12, v12 + c13],
                [v12, v22, v22 + c23],
                [v12 + c13, v22 + c23, v22 + 2.0 * c23 + v33],
            ]
        )

    def step_law(self, t0: float, t1: float) -> StepLaw:
        dt = t1 - t0
        if not dt > 0.0:
            raise ValueError("a step must have positive length")
        a, s = self.rates.mean_reversion, self.rates.volatility
        b = float(b_factor(a, dt))
        int_alpha = float(
            np.log(self.curve.discount(t0) / self.curve.discount(t1))
            + 0.5 * (integrated_variance(self.rates, t1) - integrated_variance(self.rates, t0))
        )
        transition = np.array([[np.exp(-a * dt), 0.0, 0.0], [b, 1.0, 0.0], [b, 0.0, 1.0]])
        half_var = 0.0
        shift_x = shift_i = shift_e = 0.0
        pieces = segments(
            t0, t1, self.equity.vol_schedule, self.prices_of_risk.rates_schedule,
            self.prices_of_risk.equity_schedule,
        )
        for u0, u1, (vol, lam_r, lam_s) in pieces:
            half_var += 0.5 * vol**2 * (u1 - u0)
            shift_x += s * lam_r * float(b_factor(a, t1 - u0) - b_factor(a, t1 - u1))
            shift_i += s * lam_r * float(phi2(a, t1 - u0) - phi2(a, t1 - u1))
            shift_e += vol * lam_s * (u1 - u0)
        drift = np.array([0.0, 0.0, int_alpha - half_var])
        shift = np.array([shift_x, shift_i, shift_i + shift_e])
        chol = np.linalg.cholesky(self.step_covariance(t0, t1))
        return StepLaw(transition=transition, drift=drift, chol=chol, real_world_shift=shift)

    def columns(
        self, times: np.ndarray, states: np.ndarray, names: tuple[str, ...] | None = None
    ) -> dict[str, np.ndarray]:
        """Output columns ``(n_paths, n_times)`` from states ``(n_paths, n_times, 3)``: all of
        them, or only ``names``. Each column is one pass over the paths with the deterministic
        factor of its closed form computed once per time: ``P(t, t+m) = A(t, m) e^{-B(m) x_t}``
        with ``A(t, m) = P(t, t+m)`` at ``x = 0`` (all maturities in one broadcast) and
        ``B_t = e^{I_t} B_t|_{I=0}``."""
        times = np.asarray(times, dtype=float)
        bonds = {bond_column(m): m for m in self.bond_maturities}
        equity = equity_column(self.equity.name)
        wanted = ("short_rate", "cash_account", *bonds, equity) if names is None else tuple(names)
        unknown = [c for c in wanted if c not in ("short_rate", "cash_account", equity, *bonds)]
        if unknown:
            raise ValueError(f"unknown output columns {unknown}")
        x = states[:, :, 0]
        out: dict[str, np.ndarray] = {}
        if "short_rate" in wanted:
            out["short_rate"] = np.add(x, alpha(self.curve, self.rates, times)[None, :])
        if "cash_account" in wanted:
            cash = np.exp(states[:, :, 1])
            cash *= cash_account(self.curve, self.rates, times, 0.0)[None, :]
            out["cash_account"] = cash
        maturities = np.array([bonds[c] for c in wanted if c in bonds])
        if maturities.size:
            # (n_bonds, n_paths, n_times) in one broadcast; each bond column is a contiguous slab.
            a_factor = zcb_price(self.curve, self.rates, times[None, :], maturities[:, None], 0.0)
            prices = np.multiply(x[None, :, :], -b_factor(self.rates.mean_reversion, maturities)[:, None, None])
            np.exp(prices, out=prices)
            prices *= a_factor[:, None, :]
            for i, c in enumerate(c for c in wanted if c in bonds):
                out[c] = prices[i]
        if equity in wanted:
            out[equity] = np.exp(states[:, :, 2])
        return {c: out[c] for c in wanted}

    def column_units(self) -> dict[str, str]:
        return rates_equity_units(self.bond_maturities, self.equity.name)
