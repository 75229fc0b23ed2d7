"""A whole economy as one exact linear-Gaussian scenario model.

Parts (each optional except the rates):

* **rates**: Hull-White one-factor (driver ``rates``) or G2++ (drivers ``rates_x``,
  ``rates_y``), fitted to today's nominal curve; states: the factors and ``I = int (sum of
  factors) ds`` (the cash account is ``e^I`` times a deterministic factor);
* **indices**: any number of total-return indices (equities, property), each
  ``d ln S = (r - sigma_S(t)^2 / 2) dt + sigma_S(t) dZ_S`` under the market-consistent measure,
  with its own driver (named after the index) and piecewise-constant volatility;
* **inflation** (Jarrow-Yildirim, as in :mod:`pqflow.models.jarrow_yildirim`): a Hull-White
  real short rate fitted to today's real curve (driver ``real_rate``) and a lognormal consumer
  price index (driver ``inflation``), ``dI / I = (n - r) dt + sigma_I dW_I`` under the nominal
  market-consistent measure.

One correlation matrix covers every driver. Each state's noise over a step is a sum of
kernel-weighted driver increments (:mod:`pqflow.models.kernels`), so the covariance and the
real-world shift of the mean are exact closed forms, whatever the parts. Over a step of length
``D`` (``B_k(D) = (1 - e^{-kD}) / k``; ``f`` the rate factors with rates ``k_f``):

    f_1 = e^{-k_f D} f_0 + e_f
    I_1 = I_0 + sum_f B_f(D) f_0 + e_I
    L_1 = L_0 + sum_f B_f(D) f_0 + int phi - int sigma_S^2 / 2 + e_I + e_S          (each index)
    y_1 = e^{-a_r D} y_0 - c B_r(D) + e_y                                          (real factor)
    C_1 = C_0 + sum_f B_f(D) f_0 - B_r(D) y_0 + int phi - int alpha_r - sigma_I^2 D / 2
          + c phi2_r(D) + e_I - e_Y + e_C                                          (log CPI)

with ``c = rho(real_rate, inflation) sigma_I sigma_r`` and ``int phi = ln P(0,t0)/P(0,t1) +
(V(t1) - V(t0))/2`` (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed.,
2006, ch. 3.3, 4.2 and 15.1). With one part at a time it is exactly the models of
:mod:`pqflow.models.hull_white_equity`, :mod:`pqflow.models.g2pp_equity` and
:mod:`pqflow.models.jarrow_yildirim` (tested to rounding); those are checked against QuantLib.

A new Gaussian part is a new set of states with their exposures, transition rows and drift;
the engine, the density weights and the storage need no change.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models import g2pp, hull_white
from pqflow.models.base import StepLaw, StepLaws
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams, b_factor, phi2
from pqflow.models.hull_white_equity import bond_column
from pqflow.models.jarrow_yildirim import CPI_COLUMN, REAL_SHORT_RATE_COLUMN, real_bond_column
from pqflow.models.kernels import Exposure, grid_moments, grid_pieces
from pqflow.models.schedule import PiecewiseConstant, as_schedule

__all__ = [
    "INDEX_KINDS",
    "RATES_DRIVERS",
    "REAL_RATE_DRIVER",
    "INFLATION_DRIVER",
    "index_column",
    "TotalReturnIndex",
    "InflationPart",
    "EconomyModel",
]

INDEX_KINDS = ("equity", "property")
RATES_DRIVERS = {"hull_white": ("rates",), "g2pp": ("rates_x", "rates_y")}
REAL_RATE_DRIVER = "real_rate"
INFLATION_DRIVER = "inflation"
_NAME = re.compile(r"^[a-z][a-z0-9_]*$")


def index_column(kind: str, name: str) -> str:
    """Column of a total-return index: ``equity_{name}`` or ``property_{name}``."""
    if kind not in INDEX_KINDS:
        raise ValueError(f"index kind must be one of {INDEX_KINDS}, not {kind!r}")
    return f"{kind}_{name}"


@dataclass(frozen=True, kw_only=True)
class TotalReturnIndex:
    """A total-return index (income reinvested): ``kind`` equity or property, ``level`` at time
    0, ``income_yield`` (dividend or rental, continuous; used for options on the price index),
    ``volatility`` (a number or piecewise constant). Its driver is named ``name``."""

    name: str
    kind: str
    level: float
    income_yield: float
    volatility: float | PiecewiseConstant

    def __post_init__(self) -> None:
        if not _NAME.match(self.name) or self.name in (*RATES_DRIVERS["hull_white"], *RATES_DRIVERS["g2pp"], REAL_RATE_DRIVER, INFLATION_DRIVER):
            raise ValueError(f"index name {self.name!r} must be lower-case letters, digits, _ and not a rates/inflation driver name")
        if self.kind not in INDEX_KINDS:
            raise ValueError(f"index kind must be one of {INDEX_KINDS}, not {self.kind!r}")
        if not self.level > 0.0:
            raise ValueError(f"index {self.name}: level must be positive")
        if not all(v > 0.0 for v in self.vol_schedule.values):
            raise ValueError(f"index {self.name}: volatility must be positive")

    @property
    def vol_schedule(self) -> PiecewiseConstant:
        return as_schedule(self.volatility)

    @property
    def column(self) -> str:
        return index_column(self.kind, self.name)


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


@dataclass(frozen=True, kw_only=True)
class EconomyModel:
    """Rates (Hull-White or G2++), total-return indices and optional inflation, correlated.

    correlation: ``(n, n)`` over ``drivers`` (see :meth:`driver_names`; for G2++ the
    ``(rates_x, rates_y)`` entry must equal ``rates.rho``). prices_of_risk: per driver name, a
    number or a schedule (missing: zero).
    """

    curve: DiscountCurve
    rates: HullWhiteParams | G2PlusPlusParams
    indices: tuple[TotalReturnIndex, ...]
    correlation: np.ndarray
    prices_of_risk: dict[str, float | PiecewiseConstant]
    bond_maturities: tuple[float, ...]
    inflation: InflationPart | None = None
    _exposures: tuple[tuple[Exposure, ...], ...] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "indices", tuple(self.indices))
        names = [i.name for i in self.indices]
        if len(set(names)) != len(names):
            raise ValueError(f"index names must be unique, got {names}")
        drivers = self.driver_names
        corr = np.array(self.correlation, dtype=float)
        if corr.shape != (len(drivers), len(drivers)):
            raise ValueError(f"correlation must be {len(drivers)} x {len(drivers)} over drivers {drivers}")
        if not np.allclose(corr, corr.T, atol=0.0, rtol=0.0) or not np.all(np.diag(corr) == 1.0):
            raise ValueError("correlation must be symmetric with a unit diagonal")
        if np.linalg.eigvalsh(corr)[0] <= 1e-12:
            raise ValueError("the driver correlation matrix must be positive definite")
        if isinstance(self.rates, G2PlusPlusParams) and corr[0, 1] != self.rates.rho:
            raise ValueError("the (rates_x, rates_y) correlation must equal the G2++ rho")
        unknown = set(self.prices_of_risk) - set(drivers)
        if unknown:
            raise ValueError(f"prices of risk for unknown drivers {sorted(unknown)}; drivers are {drivers}")
        corr.flags.writeable = False
        object.__setattr__(self, "correlation", corr)
        object.__setattr__(self, "prices_of_risk", {k: as_schedule(v) for k, v in self.prices_of_risk.items()})
        object.__setattr__(self, "_exposures", self._build_exposures())

    # ---------------------------------------------------------------- structure

    @property
    def rates_model(self) -> str:
        return "g2pp" if isinstance(self.rates, G2PlusPlusParams) else "hull_white"

    @property
    def driver_names(self) -> tuple[str, ...]:
        out = [*RATES_DRIVERS[self.rates_model], *(i.name for i in self.indices)]
        if self.inflation is not None:
            out += [REAL_RATE_DRIVER, INFLATION_DRIVER]
        return tuple(out)

    def _factor_rates(self) -> tuple[tuple[float, float, str], ...]:
        """(mean reversion, volatility, driver) of each rate factor."""
        r = self.rates
        if isinstance(r, G2PlusPlusParams):
            return ((r.a, r.sigma, "rates_x"), (r.b, r.eta, "rates_y"))
        return ((r.mean_reversion, r.volatility, "rates"),)

    @property
    def state_names(self) -> tuple[str, ...]:
        factors = ("x",) if self.rates_model == "hull_white" else ("x", "y")
        out = [*factors, "integral_x", *(f"log_{i.column}" for i in self.indices)]
        if self.inflation is not None:
            out += ["x_real", "log_cpi"]
        return tuple(out)

    def _build_exposures(self) -> tuple[tuple[Exposure, ...], ...]:
        factors = self._factor_rates()
        integral = tuple(Exposure(driver=d, kind="b", rate=k, scale=s) for k, s, d in factors)
        rows: list[tuple[Exposure, ...]] = [(Exposure(driver=d, kind="exp", rate=k, scale=s),) for k, s, d in factors]
        rows.append(integral)
        for idx in self.indices:
            rows.append((*integral, Exposure(driver=idx.name, kind="one", scale=idx.vol_schedule)))
        if self.inflation is not None:
            ar, sr = self.inflation.real.mean_reversion, self.inflation.real.volatility
            rows.append((Exposure(driver=REAL_RATE_DRIVER, kind="exp", rate=ar, scale=sr),))
            rows.append((
                *integral,
                Exposure(driver=REAL_RATE_DRIVER, kind="b", rate=ar, scale=-sr),
                Exposure(driver=INFLATION_DRIVER, kind="one", scale=self.inflation.inflation_volatility),
            ))
        return tuple(rows)

    def initial_state(self) -> np.ndarray:
        n_f = len(self._factor_rates())
        out = [0.0] * n_f + [0.0] + [float(np.log(i.level)) for i in self.indices]
        if self.inflation is not None:
            out += [0.0, float(np.log(self.inflation.cpi_base))]
        return np.array(out)

    # ---------------------------------------------------------------- dynamics

    def _integrated_variance(self, u: np.ndarray | float) -> np.ndarray:
        if isinstance(self.rates, G2PlusPlusParams):
            return np.asarray(g2pp.integrated_variance(self.rates, u), dtype=float)
        return np.asarray(hull_white.integrated_variance(self.rates, u), dtype=float)

    def step_covariance(self, t0: float, t1: float) -> np.ndarray:
        cov, _ = grid_moments(np.array([t0, t1]), self._exposures, self.correlation, self.driver_names, self.prices_of_risk)
        return cov[0]

    def step_law(self, t0: float, t1: float) -> StepLaw:
        if not t1 - t0 > 0.0:
            raise ValueError("a step must have positive length")
        return self.step_laws(np.array([t0, t1], dtype=float)).law(0)

    def step_laws(self, times: np.ndarray) -> StepLaws:
        """The exact law of every step of ``times`` at once (vectorised over the steps)."""
        times = np.asarray(times, dtype=float)
        if times.ndim != 1 or times.size < 2 or np.any(np.diff(times) <= 0.0):
            raise ValueError("times must be a 1-d increasing array of at least two points")
        t0, t1 = times[:-1], times[1:]
        dt = t1 - t0
        n_steps = dt.size
        cov, shift = grid_moments(times, self._exposures, self.correlation, self.driver_names, self.prices_of_risk)
        factors = self._factor_rates()
        n_f = len(factors)
        d = len(self._exposures)
        transition = np.tile(np.eye(d), (n_steps, 1, 1))
        drift = np.zeros((n_steps, d))
        b_rows = np.stack([b_factor(k, dt) for k, _, _ in factors], axis=1)  # (K, n_f)
        for f, (k, _, _) in enumerate(factors):
            transition[:, f, f] = np.exp(-k * dt)
        int_phi = np.log(self.curve.discount(t0) / self.curve.discount(t1)) + 0.5 * (
            self._integrated_variance(t1) - self._integrated_variance(t0)
        )
        transition[:, n_f, :n_f] = b_rows
        for j, idx in enumerate(self.indices):
            row = n_f + 1 + j
            transition[:, row, :n_f] = b_rows
            pieces = grid_pieces(times, idx.vol_schedule)
            half_var = pieces.per_step(0.5 * pieces.values(idx.vol_schedule) ** 2 * pieces.length, n_steps)
            drift[:, row] = int_phi - half_var
        if self.inflation is not None:
            inf = self.inflation
            y_row, c_row = d - 2, d - 1
            ar, sr, si = inf.real.mean_reversion, inf.real.volatility, inf.inflation_volatility
            names = self.driver_names
            c = self.correlation[names.index(REAL_RATE_DRIVER), names.index(INFLATION_DRIVER)] * si * sr
            br = b_factor(ar, dt)
            transition[:, y_row, y_row] = np.exp(-ar * dt)
            drift[:, y_row] = -c * br
            transition[:, c_row, :n_f] = b_rows
            transition[:, c_row, y_row] = -br
            int_alpha_r = np.log(inf.real_curve.discount(t0) / inf.real_curve.discount(t1)) + 0.5 * (
                hull_white.integrated_variance(inf.real, t1) - hull_white.integrated_variance(inf.real, t0)
            )
            drift[:, c_row] = int_phi - int_alpha_r - 0.5 * si**2 * dt + c * phi2(ar, dt)
        try:
            chol = np.linalg.cholesky(cov)
        except np.linalg.LinAlgError:
            raise ValueError(
                "a step covariance is not positive definite: the driver correlations (or a zero "
                "volatility) make two states move as one"
            ) from None
        return StepLaws(transition=transition, drift=drift, chol=chol, real_world_shift=shift)

    # ---------------------------------------------------------------- outputs

    def known_columns(self) -> tuple[str, ...]:
        out = ["short_rate", "cash_account", *(bond_column(m) for m in self.bond_maturities)]
        out += [i.column for i in self.indices]
        if self.inflation is not None:
            out += [CPI_COLUMN, REAL_SHORT_RATE_COLUMN, *(real_bond_column(m) for m in self.inflation.real_bond_maturities)]
        return tuple(out)

    def _bond_exponents(self, times: np.ndarray, maturities: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``ln A(t, m)`` ``(n_bonds, n_times)`` and the factor loadings ``B_f(m)`` ``(n_bonds, n_f)``
        of ``P(t, t+m) = A(t, m) exp(-sum_f B_f(m) f_t)``."""
        t, m = times[None, :], maturities[:, None]
        if isinstance(self.rates, G2PlusPlusParams):
            log_a = np.log(g2pp.zcb_price(self.curve, self.rates, t, m, 0.0, 0.0))
            loads = np.stack([b_factor(self.rates.a, maturities), b_factor(self.rates.b, maturities)], axis=1)
        else:
            log_a = np.log(hull_white.zcb_price(self.curve, self.rates, t, m, 0.0))
            loads = b_factor(self.rates.mean_reversion, maturities)[:, None]
        return log_a, loads

    def columns(self, times: np.ndarray, states: np.ndarray, names: tuple[str, ...] | None = None) -> dict[str, np.ndarray]:
        """Output columns ``(n_paths, n_times)`` from states ``(n_paths, n_times, d)``."""
        times = np.asarray(times, dtype=float)
        known = self.known_columns()
        wanted = known if names is None else tuple(names)
        unknown = [c for c in wanted if c not in known]
        if unknown:
            raise ValueError(f"unknown output columns {unknown}")
        n_f = len(self._factor_rates())
        out: dict[str, np.ndarray] = {}
        if "short_rate" in wanted:
            if isinstance(self.rates, G2PlusPlusParams):
                shift = g2pp.phi(self.curve, self.rates, times)
            else:
                shift = hull_white.alpha(self.curve, self.rates, times)
            rate = np.add(states[:, :, 0], shift[None, :])
            for f in range(1, n_f):
                rate += states[:, :, f]
            out["short_rate"] = rate
        if "cash_account" in wanted:
            cash = np.exp(states[:, :, n_f])
            cash *= (np.exp(0.5 * self._integrated_variance(times)) / self.curve.discount(times))[None, :]
            out["cash_account"] = cash
        chosen = [(bond_column(m), m) for m in self.bond_maturities if bond_column(m) in wanted]
        if chosen:
            mats = np.array([m for _, m in chosen])
            log_a, loads = self._bond_exponents(times, mats)
            prices = np.multiply(states[None, :, :, 0], -loads[:, 0, None, None])
            for f in range(1, n_f):
                prices -= loads[:, f, None, None] * states[None, :, :, f]
            prices += log_a[:, None, :]
            np.exp(prices, out=prices)
            for i, (name, _) in enumerate(chosen):
                out[name] = prices[i]
        for j, idx in enumerate(self.indices):
            if idx.column in wanted:
                out[idx.column] = np.exp(states[:, :, n_f + 1 + j])
        if self.inflation is not None:
            inf = self.inflation
            y = states[:, :, -2]
            if CPI_COLUMN in wanted:
                out[CPI_COLUMN] = np.exp(states[:, :, -1])
            if REAL_SHORT_RATE_COLUMN in wanted:
                out[REAL_SHORT_RATE_COLUMN] = y + hull_white.alpha(inf.real_curve, inf.real, times)[None, :]
            real = [(real_bond_column(m), m) for m in inf.real_bond_maturities if real_bond_column(m) in wanted]
            if real:
                mats = np.array([m for _, m in real])
                a_factor = hull_white.zcb_price(inf.real_curve, inf.real, times[None, :], mats[:, None], 0.0)
                b = b_factor(inf.real.mean_reversion, mats)
                for i, (name, _) in enumerate(real):
                    out[name] = np.exp(-b[i] * y) * a_factor[i][None, :]
        return {c: out[c] for c in wanted}

    def column_units(self) -> dict[str, str]:
        units = {
            "short_rate": "per year, continuously compounded (nominal)",
            "cash_account": "currency units per unit invested at time 0",
        }
        for m in self.bond_maturities:
            units[bond_column(m)] = f"price of a zero-coupon bond paying 1 at time + {m:g} years"
        for idx in self.indices:
            income = "dividends" if idx.kind == "equity" else "rental income"
            units[idx.column] = f"{idx.kind} total-return index level ({income} reinvested)"
        if self.inflation is not None:
            units[CPI_COLUMN] = f"consumer price index level ({self.inflation.cpi_base:g} at time 0)"
            units[REAL_SHORT_RATE_COLUMN] = "real, per year, continuously compounded"
            for m in self.inflation.real_bond_maturities:
                units[real_bond_column(m)] = (
                    f"price in index units of a real zero-coupon bond paying cpi(time + {m:g} years) "
                    "currency units then; its currency price is cpi times this value"
                )
        return units
