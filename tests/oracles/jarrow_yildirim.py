"""Test oracle: the Jarrow-Yildirim model on its own (Hull-White nominal and real rates and a
lognormal CPI), exact joint transition written out for this one model (independently of the
economy model's kernels). The model, its closed forms and the derivation are in
:mod:`pqflow.models.jarrow_yildirim`; production simulates inflation as a part of
:class:`pqflow.models.economy.EconomyModel`, which tests check against this class to rounding
(tests/test_economy.py); this class is checked against QuantLib in tests/test_jarrow_yildirim.py.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

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
from pqflow.models.jarrow_yildirim import (
    CPI_COLUMN,
    REAL_SHORT_RATE_COLUMN,
    JarrowYildirimParams,
    real_short_rate_shift,
)
from pqflow.models.schedule import PiecewiseConstant, as_schedule, segments
from pqflow.storage.names import bond_column, real_bond_column

__all__ = ["InflationPricesOfRisk", "JarrowYildirimModel"]


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
