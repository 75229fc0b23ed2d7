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
2006, ch. 3.3, 4.2 and 15.1). This is the only simulation model. With one part at a time it is
exactly the single-part models the tests keep as independent oracles (Hull-White or G2++ with
one equity index, Jarrow-Yildirim; ``tests/oracles/``, checked to rounding), which are checked
against QuantLib and quadrature.

A new Gaussian part is a new file with a class satisfying :class:`GaussianPart` (its states,
their exposures, transition rows, drift and columns; :mod:`pqflow.models.total_return` and
:mod:`pqflow.models.inflation` are the examples): the engine, the density weights and the
storage need no change.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.models.base import StepLaw, StepLaws
from pqflow.models.hull_white import b_factor
from pqflow.models.inflation import INFLATION_DRIVER, REAL_RATE_DRIVER, InflationPart
from pqflow.models.kernels import Exposure, grid_moments
from pqflow.models.rates import RATES_DRIVERS, RatesModel
from pqflow.models.schedule import PiecewiseConstant, as_schedule
from pqflow.models.total_return import TotalReturnIndex
from pqflow.storage.names import CASH_ACCOUNT, SHORT_RATE, bond_column

__all__ = [
    "RATES_DRIVERS",
    "REAL_RATE_DRIVER",
    "INFLATION_DRIVER",
    "RatesStep",
    "GaussianPart",
    "TotalReturnIndex",
    "InflationPart",
    "EconomyModel",
]

@dataclass(frozen=True, kw_only=True)
class RatesStep:
    """What the rates give every other part over the ``K`` steps of a grid: ``b_rows``
    ``(K, n_f)``, the loading ``B_f(D)`` of the time integral of the short rate on each rate
    factor at the step's start; ``int_phi`` ``(K,)``, ``int_{t0}^{t1} phi``, the deterministic
    part of that integral."""

    b_rows: np.ndarray
    int_phi: np.ndarray


@runtime_checkable
class GaussianPart(Protocol):
    """A block of states beside the rates, linear-Gaussian over each step.

    Its noise loads on the drivers through :class:`pqflow.models.kernels.Exposure` s (plus, for
    anything priced in currency, the loadings ``integral`` of the short rate's time integral);
    its transition couples its states to the rate factors and to themselves. Every array is
    stacked over the ``K`` steps of ``times``.
    """

    @property
    def drivers(self) -> tuple[str, ...]: ...

    @property
    def state_names(self) -> tuple[str, ...]: ...

    def initial_state(self) -> np.ndarray: ...

    def exposures(self, integral: tuple[Exposure, ...]) -> tuple[tuple[Exposure, ...], ...]:
        """One row of loadings per state."""
        ...

    def step_rows(
        self, times: np.ndarray, rates: RatesStep, correlation: Callable[[str, str], float]
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(to_factors (K, m, n_f), own (K, m, m), drift (K, m))`` for its ``m`` states:
        ``s_1 = to_factors f_0 + own s_0 + drift + noise``."""
        ...

    def known_columns(self) -> tuple[str, ...]: ...

    def columns(self, times: np.ndarray, states: np.ndarray, wanted: tuple[str, ...]) -> dict[str, np.ndarray]:
        """Its output columns among ``wanted`` from its states ``(n_paths, n_times, m)``."""
        ...

    def column_units(self) -> dict[str, str]: ...


@dataclass(frozen=True, kw_only=True)
class EconomyModel:
    """Rates (Hull-White or G2++) and any Gaussian parts beside them (total-return indices,
    inflation, ...), correlated through one matrix; a ``ScenarioModel``.

    parts: the parts in state order after the rates. correlation: ``(n, n)`` over
    :attr:`driver_names` (the rates' drivers, then each part's; for G2++ the
    ``(rates_x, rates_y)`` entry must equal ``rates.rho``). prices_of_risk: per driver name, a
    number or a schedule (missing: zero).
    """

    curve: DiscountCurve
    rates: RatesModel
    parts: tuple[GaussianPart, ...]
    correlation: np.ndarray
    prices_of_risk: dict[str, float | PiecewiseConstant]
    bond_maturities: tuple[float, ...]
    _exposures: tuple[tuple[Exposure, ...], ...] = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "parts", tuple(self.parts))
        for part in self.parts:
            if not isinstance(part, GaussianPart):
                raise TypeError(f"{type(part).__name__} is not a GaussianPart")
        drivers = self.driver_names
        repeated = sorted({d for d in drivers if drivers.count(d) > 1})
        if repeated:
            raise ValueError(f"driver names must be unique across the parts; repeated: {repeated}")
        corr = np.array(self.correlation, dtype=float)
        if corr.shape != (len(drivers), len(drivers)):
            raise ValueError(f"correlation must be {len(drivers)} x {len(drivers)} over drivers {drivers}")
        if not np.allclose(corr, corr.T, atol=0.0, rtol=0.0) or not np.all(np.diag(corr) == 1.0):
            raise ValueError("correlation must be symmetric with a unit diagonal")
        if np.linalg.eigvalsh(corr)[0] <= 1e-12:
            raise ValueError("the driver correlation matrix must be positive definite")
        for (a, b), fixed in self.rates.fixed_correlations().items():
            if corr[drivers.index(a), drivers.index(b)] != fixed:
                raise ValueError(f"the ({a}, {b}) correlation must equal the {self.rates.label} value {fixed:g}")
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
        return self.rates.model

    @property
    def indices(self) -> tuple[TotalReturnIndex, ...]:
        return tuple(p for p in self.parts if isinstance(p, TotalReturnIndex))

    @property
    def inflation(self) -> InflationPart | None:
        return next((p for p in self.parts if isinstance(p, InflationPart)), None)

    @property
    def driver_names(self) -> tuple[str, ...]:
        return (*self.rates.drivers, *(d for p in self.parts for d in p.drivers))

    def _factor_rates(self) -> tuple[tuple[float, float, str], ...]:
        """(mean reversion, volatility, driver) of each rate factor."""
        return self.rates.factor_rates()

    @property
    def _n_rates_states(self) -> int:
        return len(self._factor_rates()) + 1

    def _part_slices(self) -> list[slice]:
        out, start = [], self._n_rates_states
        for part in self.parts:
            m = len(part.state_names)
            out.append(slice(start, start + m))
            start += m
        return out

    @property
    def state_names(self) -> tuple[str, ...]:
        return (*self.rates.factor_names, "integral_x", *(n for p in self.parts for n in p.state_names))

    def _build_exposures(self) -> tuple[tuple[Exposure, ...], ...]:
        factors = self._factor_rates()
        integral = tuple(Exposure(driver=d, kind="b", rate=k, scale=s) for k, s, d in factors)
        rows: list[tuple[Exposure, ...]] = [(Exposure(driver=d, kind="exp", rate=k, scale=s),) for k, s, d in factors]
        rows.append(integral)
        for part in self.parts:
            rows.extend(part.exposures(integral))
        return tuple(rows)

    def state_drivers(self) -> tuple[tuple[str, ...], ...]:
        """The drivers each state's noise loads on, in state order."""
        return tuple(tuple(dict.fromkeys(e.driver for e in row)) for row in self._exposures)

    def initial_state(self) -> np.ndarray:
        rates = [0.0] * self._n_rates_states
        return np.concatenate([np.array(rates), *(p.initial_state() for p in self.parts)])

    # ---------------------------------------------------------------- dynamics

    def _integrated_variance(self, u: np.ndarray | float) -> np.ndarray:
        return np.asarray(self.rates.integrated_variance(u), dtype=float)

    def _pair(self, a: str, b: str) -> float:
        names = self.driver_names
        return float(self.correlation[names.index(a), names.index(b)])

    def step_covariance(self, t0: float, t1: float) -> np.ndarray:
        cov, _ = grid_moments(np.array([t0, t1]), self._exposures, self.correlation, self.driver_names,
                              self.prices_of_risk)
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
        transition = np.zeros((n_steps, d, d))
        drift = np.zeros((n_steps, d))
        b_rows = np.stack([b_factor(k, dt) for k, _, _ in factors], axis=1)  # (K, n_f)
        for f, (k, _, _) in enumerate(factors):
            transition[:, f, f] = np.exp(-k * dt)
        transition[:, n_f, :n_f] = b_rows
        transition[:, n_f, n_f] = 1.0
        int_phi = np.log(self.curve.discount(t0) / self.curve.discount(t1)) + 0.5 * (
            self._integrated_variance(t1) - self._integrated_variance(t0)
        )
        rates_step = RatesStep(b_rows=b_rows, int_phi=int_phi)
        for part, rows in zip(self.parts, self._part_slices(), strict=True):
            to_factors, own, part_drift = part.step_rows(times, rates_step, self._pair)
            transition[:, rows, :n_f] = to_factors
            transition[:, rows, rows] = own
            drift[:, rows] = part_drift
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
        out = [SHORT_RATE, CASH_ACCOUNT, *(bond_column(m) for m in self.bond_maturities)]
        for part in self.parts:
            out += part.known_columns()
        return tuple(out)

    def _bond_exponents(self, times: np.ndarray, maturities: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``ln A(t, m)`` ``(n_bonds, n_times)`` and the factor loadings ``B_f(m)`` ``(n_bonds, n_f)``
        of ``P(t, t+m) = A(t, m) exp(-sum_f B_f(m) f_t)``."""
        return self.rates.bond_exponents(self.curve, times, maturities)

    def columns(self, times: np.ndarray, states: np.ndarray, names: tuple[str, ...] | None = None) -> dict[str,
                                                                                                           np.ndarray]:
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
            shift = self.rates.short_rate_shift(self.curve, times)
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
        for part, rows in zip(self.parts, self._part_slices(), strict=True):
            out.update(part.columns(times, states[:, :, rows], wanted))
        return {c: out[c] for c in wanted}

    def column_units(self) -> dict[str, str]:
        units = {
            "short_rate": "per year, continuously compounded (nominal)",
            "cash_account": "currency units per unit invested at time 0",
        }
        for m in self.bond_maturities:
            units[bond_column(m)] = f"price of a zero-coupon bond paying 1 at time + {m:g} years"
        for part in self.parts:
            units.update(part.column_units())
        return units
