"""Jarrow-Yildirim inflation as a Gaussian part of the economy model.

A Hull-White real short rate ``r = y + alpha_r(t)`` fitted to today's real curve and a lognormal
consumer price index, under the nominal market-consistent measure (as in
:mod:`pqflow.models.jarrow_yildirim`, which derives it; Jarrow and Yildirim 2003, Brigo and
Mercurio 2006, ch. 15.1):

    dy = (-a_r y - rho(real_rate, inflation) sigma_I sigma_r) dt + sigma_r dW_r,
    dI / I = (n - r) dt + sigma_I dW_I,

so over a step (``c = rho sigma_I sigma_r``, ``B_r``, ``phi2_r`` the real rate's kernels)

    y_1 = e^{-a_r D} y_0 - c B_r(D) + e_y
    C_1 = C_0 + sum_f B_f(D) f_0 - B_r(D) y_0 + int phi - int alpha_r - sigma_I^2 D / 2 + c phi2_r(D)
          + e_I - e_Y + e_C

with ``C = ln I`` and ``e_I`` the nominal rates' integral noise (whatever the nominal model).
The real bond ``P_r(t, T)`` is the Hull-White bond on the real curve at ``y_t`` (in index units).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models import hull_white
from pqflow.models.hull_white import HullWhiteParams, b_factor, phi2
from pqflow.models.kernels import Exposure
from pqflow.storage.names import CPI as CPI_COLUMN
from pqflow.storage.names import REAL_SHORT_RATE as REAL_SHORT_RATE_COLUMN
from pqflow.storage.names import real_bond_column

__all__ = ["REAL_RATE_DRIVER", "INFLATION_DRIVER", "InflationPart"]

REAL_RATE_DRIVER = "real_rate"
INFLATION_DRIVER = "inflation"


@dataclass(frozen=True, kw_only=True)
class InflationPart:
    """Jarrow-Yildirim real rate and CPI: ``real_curve`` today's real discount curve (CPI units),
    ``real`` the real rate's Hull-White ``(a_r, sigma_r)``, ``inflation_volatility`` sigma_I,
    ``cpi_base`` the index at time 0 and the real bonds to publish."""

    real_curve: DiscountCurve
    real: HullWhiteParams
    inflation_volatility: float
    cpi_base: float = 1.0
    real_bond_maturities: tuple[float, ...] = ()

    def __post_init__(self) -> None:
        if not self.inflation_volatility > 0.0:
            raise ValueError("inflation volatility must be positive")
        if not self.cpi_base > 0.0:
            raise ValueError("cpi_base must be positive")
        if any(not m > 0.0 for m in self.real_bond_maturities):
            raise ValueError("real bond maturities must be positive")

    # ------------------------------------------------------------- the GaussianPart protocol

    @property
    def drivers(self) -> tuple[str, ...]:
        return (REAL_RATE_DRIVER, INFLATION_DRIVER)

    @property
    def state_names(self) -> tuple[str, ...]:
        return ("x_real", "log_cpi")

    def initial_state(self) -> np.ndarray:
        return np.array([0.0, np.log(self.cpi_base)])

    def exposures(self, integral: tuple[Exposure, ...]) -> tuple[tuple[Exposure, ...], ...]:
        ar, sr = self.real.mean_reversion, self.real.volatility
        return (
            (Exposure(driver=REAL_RATE_DRIVER, kind="exp", rate=ar, scale=sr),),
            (
                *integral,
                Exposure(driver=REAL_RATE_DRIVER, kind="b", rate=ar, scale=-sr),
                Exposure(driver=INFLATION_DRIVER, kind="one", scale=self.inflation_volatility),
            ),
        )

    def step_rows(self, times: np.ndarray, rates, correlation) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        t0, t1 = times[:-1], times[1:]
        dt = t1 - t0
        n_steps = dt.size
        ar, sr, si = self.real.mean_reversion, self.real.volatility, self.inflation_volatility
        c = correlation(REAL_RATE_DRIVER, INFLATION_DRIVER) * si * sr
        br = b_factor(ar, dt)
        to_factors = np.zeros((n_steps, 2, rates.b_rows.shape[1]))
        to_factors[:, 1, :] = rates.b_rows
        own = np.zeros((n_steps, 2, 2))
        own[:, 0, 0] = np.exp(-ar * dt)
        own[:, 1, 0] = -br
        own[:, 1, 1] = 1.0
        int_alpha_r = np.log(self.real_curve.discount(t0) / self.real_curve.discount(t1)) + 0.5 * (
            hull_white.integrated_variance(self.real, t1) - hull_white.integrated_variance(self.real, t0)
        )
        drift = np.stack([-c * br, rates.int_phi - int_alpha_r - 0.5 * si**2 * dt + c * phi2(ar, dt)], axis=1)
        return to_factors, own, drift

    def known_columns(self) -> tuple[str, ...]:
        return (CPI_COLUMN, REAL_SHORT_RATE_COLUMN, *(real_bond_column(m) for m in self.real_bond_maturities))

    def columns(self, times: np.ndarray, states: np.ndarray, wanted: tuple[str, ...]) -> dict[str, np.ndarray]:
        y = states[:, :, 0]
        out: dict[str, np.ndarray] = {}
        if CPI_COLUMN in wanted:
            out[CPI_COLUMN] = np.exp(states[:, :, 1])
        if REAL_SHORT_RATE_COLUMN in wanted:
            out[REAL_SHORT_RATE_COLUMN] = y + hull_white.alpha(self.real_curve, self.real, times)[None, :]
        real = [(real_bond_column(m), m) for m in self.real_bond_maturities if real_bond_column(m) in wanted]
        if real:
            mats = np.array([m for _, m in real])
            a_factor = hull_white.zcb_price(self.real_curve, self.real, times[None, :], mats[:, None], 0.0)
            b = b_factor(self.real.mean_reversion, mats)
            for i, (name, _) in enumerate(real):
                out[name] = np.exp(-b[i] * y) * a_factor[i][None, :]
        return out

    def column_units(self) -> dict[str, str]:
        units = {
            CPI_COLUMN: f"consumer price index level ({self.cpi_base:g} at time 0)",
            REAL_SHORT_RATE_COLUMN: "real, per year, continuously compounded",
        }
        for m in self.real_bond_maturities:
            units[real_bond_column(m)] = (
                f"price in index units of a real zero-coupon bond paying cpi(time + {m:g} years) "
                "currency units then; its currency price is cpi times this value"
            )
        return units
