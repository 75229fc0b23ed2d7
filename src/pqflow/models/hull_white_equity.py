"""Hull-White one-factor rates with one equity total-return index: exact joint transition.

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
against the constant prices of risk ``l_r`` (rates) and ``l_S`` (equity).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.measure.prices_of_risk import PricesOfRisk
from pqflow.models.base import StepLaw
from pqflow.models.equity import EquityParams
from pqflow.models.hull_white import (
    HullWhiteParams,
    alpha,
    b_factor,
    cash_account,
    integrated_variance,
    phi2,
    zcb_price,
)

__all__ = ["HullWhiteEquityModel", "bond_column", "equity_column"]


def bond_column(maturity: float) -> str:
    """Column name of the zero-coupon bond with ``maturity`` years to run: ``zcb_10y``."""
    return f"zcb_{maturity:g}y"


def equity_column(name: str) -> str:
    """Column name of an equity total-return index: ``equity_{name}``."""
    return f"equity_{name}"


@dataclass(frozen=True, kw_only=True)
class HullWhiteEquityModel:
    """The core pair: Hull-White one-factor rates fitted to ``curve`` and one equity index."""

    curve: DiscountCurve
    rates: HullWhiteParams
    equity: EquityParams
    prices_of_risk: PricesOfRisk
    bond_maturities: tuple[float, ...]

    @property
    def state_names(self) -> tuple[str, ...]:
        return ("x", "integral_x", "log_equity")

    def initial_state(self) -> np.ndarray:
        return np.array([0.0, 0.0, np.log(self.equity.level)])

    def step_covariance(self, dt: float) -> np.ndarray:
        """Covariance of ``(e1, e2, e2 + e3)``, the noise of ``(x, I, L)``, shape ``(3, 3)``."""
        a, s = self.rates.mean_reversion, self.rates.volatility
        se, rho = self.equity.volatility, self.equity.correlation
        b = float(b_factor(a, dt))
        v11 = s**2 * float(b_factor(2.0 * a, dt))
        v12 = 0.5 * s**2 * b**2
        v22 = float(integrated_variance(self.rates, dt))
        c13 = rho * s * se * b
        c23 = rho * s * se * float(phi2(a, dt))
        v33 = se**2 * dt
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
        drift = np.array([0.0, 0.0, int_alpha - 0.5 * self.equity.volatility**2 * dt])
        lam_r, lam_s = self.prices_of_risk.rates, self.prices_of_risk.equity
        shift_x = s * lam_r * b
        shift_i = s * lam_r * float(phi2(a, dt))
        shift = np.array([shift_x, shift_i, shift_i + self.equity.volatility * lam_s * dt])
        chol = np.linalg.cholesky(self.step_covariance(dt))
        return StepLaw(transition=transition, drift=drift, chol=chol, real_world_shift=shift)

    def columns(self, times: np.ndarray, states: np.ndarray) -> dict[str, np.ndarray]:
        x = states[:, :, 0]
        out: dict[str, np.ndarray] = {
            "short_rate": x + alpha(self.curve, self.rates, times)[None, :],
            "cash_account": cash_account(self.curve, self.rates, times[None, :], states[:, :, 1]),
        }
        for m in self.bond_maturities:
            out[bond_column(m)] = zcb_price(self.curve, self.rates, times[None, :], m, x)
        out[equity_column(self.equity.name)] = np.exp(states[:, :, 2])
        return out

    def column_units(self) -> dict[str, str]:
        units = {
            "short_rate": "per year, continuously compounded",
            "cash_account": "currency units per unit invested at time 0",
        }
        for m in self.bond_maturities:
            units[bond_column(m)] = f"price of a zero-coupon bond paying 1 at time + {m:g} years"
        units[equity_column(self.equity.name)] = "total-return index level (dividends reinvested)"
        return units
