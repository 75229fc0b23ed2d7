"""The place of a non-Gaussian part that is simulated conditionally on the Gaussian economy:
Heston indices.

A Heston index reads from the economy's batch what its scheme needs and nothing else:

* the log growth of the cash account over each output step (its carry, ``int r dt``), and
* with a correlation to the Hull-White driver, that driver's increment over each output step,
  recovered exactly from the written states: ``dx = -a x dt + sigma dB_r`` gives
  ``sigma (B_r(t_1) - B_r(t_0)) = x_1 - x_0 + a (I_1 - I_0)``, with ``x = r - alpha(t)`` from
  the short rate and ``I = ln B_t + ln P(0, t) - V(t) / 2`` from the cash account
  (:mod:`pqflow.models.hull_white`). In the real-world set this is the real-world increment:
  ``int lambda_r dt`` (the rates price of risk) is taken off.

Everything else comes from the part's own random stream
(:func:`pqflow.simulation.streams.heston_generator`, a child of the batch's seed sequence beside
credit's; the engine's :func:`pqflow.simulation.engine.run_substeps` draws it), so the
Gaussian drivers' numbers are the same with or without it. The part's density
(:mod:`pqflow.measure.heston_density`) is the likelihood ratio of its own normals given the
economy: it multiplies the economy's full density exactly.

Density blocks. A block that holds the index's driver (with the rates: the index reads the cash
account) sees the index, its variance and what the index reads from the economy: the block's
rate states and the projection's increment ``sum_j beta_j dB_j`` over each output step, a linear
functional of the economy's step noise (:func:`projection_noise_rows`, exact because each ``dB_j``
is recovered exactly from the states). Its restricted density is the Gaussian likelihood ratio
of those (:class:`pqflow.measure.blocks.ObservedRows`; the index's Gaussian stand-in state is not
part of it) times the part's own density: the exact likelihood ratio of the block's own
transitions, without the other drivers' noise (``simulation/scenarios.py``).

* the increments of every deterministic-volatility total-return index it correlates with:
  ``sigma dB = d ln S - d ln B + sigma^2 dt / 2`` (less ``sigma lambda dt`` in the real world),
  exact when the index's volatility is constant over each output step.

Correlations: the index driver is ``B_S = sum_j beta_j B_j + s B_perp`` over these recoverable
drivers ``G`` (``beta = C_GG^{-1} rho_SG``), so it has exactly its configured correlations with
them, and with every other driver ``k`` the implied ``sum_j beta_j C_jk``; the calibration
refuses a matrix whose entries for the index differ (:mod:`pqflow.calibration.heston_parts`).
Under G2++ the rate drivers' increments are not recovered (two factors, one short rate). The
variance's driver is uncorrelated with every Gaussian driver (the pricing's assumption for the
rates). Within an output step the projection is filled in by a Brownian bridge (exact in law;
its intra-step co-movement with the rates' path, e.g. with ``int r dt``, is not reproduced).
"""

from __future__ import annotations

import math

import numpy as np

from pqflow.models.heston import HestonIndex
from pqflow.models.hull_white import alpha, integrated_variance
from pqflow.models.schedule import as_schedule, segments
from pqflow.models.total_return import TotalReturnIndex
from pqflow.simulation.heston_scheme import HestonPaths, simulate_heston_paths

__all__ = [
    "heston_substeps",
    "rates_driver_increments",
    "index_driver_increments",
    "driver_increments",
    "projection_noise_rows",
    "simulate_heston_index",
]

RATES_DRIVER = "rates"


def heston_substeps(times: np.ndarray, substeps_per_year: int) -> int:
    """Whole substeps per output step so that each is at most ``1 / substeps_per_year`` years."""
    longest = float(np.max(np.diff(times))) if times.size > 1 else 1.0
    return max(1, math.ceil(substeps_per_year * longest - 1e-9))


def _integral(schedule, t0: float, t1: float) -> float:
    return float(sum(v * (u1 - u0) for u0, u1, (v,) in segments(t0, t1, schedule)))


def rates_driver_increments(model, times: np.ndarray, cols: dict[str, np.ndarray], *, measure: str) -> np.ndarray:
    """The Hull-White driver's increments over each output step, ``(n, n_steps)``, in the set's
    measure (module docstring). ``model``: the run's economy (curve, Hull-White rates, prices
    of risk); ``cols`` must hold ``short_rate`` and ``cash_account``."""
    rates = model.rates
    if RATES_DRIVER not in rates.recoverable_drivers:
        raise ValueError(f"the rates driver's increments are not recovered under {rates.label} rates (Hull-White only)")
    a, sigma = rates.mean_reversion, rates.volatility
    x = cols["short_rate"] - alpha(model.curve, rates, times)[None, :]
    integ = (np.log(cols["cash_account"]) + np.log(model.curve.discount(times))[None, :]
             - 0.5 * integrated_variance(rates, times)[None, :])
    inc = (np.diff(x, axis=1) + a * np.diff(integ, axis=1)) / sigma
    if measure == "real_world":
        lam = as_schedule(model.prices_of_risk.get(RATES_DRIVER, 0.0))
        inc -= np.array([_integral(lam, times[k], times[k + 1]) for k in range(times.size - 1)])[None, :]
    return inc


def index_driver_increments(
    model, index: TotalReturnIndex, times: np.ndarray, cols: dict[str, np.ndarray], *, measure: str
) -> np.ndarray:
    """A deterministic-volatility index's driver increments over each output step, ``(n, n_steps)``,
    in the set's measure: ``d ln S = r dt - sigma^2 dt / 2 + sigma dB^Q`` (total return) and
    ``dB^Q = dB^P + lambda dt`` give ``sigma dB = d ln S - d ln B + sigma^2 dt / 2 (- sigma lambda dt
    in the real world)``, exact when ``sigma`` is constant over each output step (else a
    ``ValueError``)."""
    vol = index.vol_schedule
    inside = [k for k in vol.knots if any(times[i] < k < times[i + 1] for i in range(times.size - 1))]
    if inside:
        raise ValueError(
            f"index {index.name}'s volatility changes at {inside[0]:g} years inside an output step: its driver's "
            "increments cannot be recovered for a Heston index that correlates with it"
        )
    lam = as_schedule(model.prices_of_risk.get(index.name, 0.0))
    log_s = np.log(cols[index.column])
    log_b = np.log(cols["cash_account"])
    out = np.empty((log_s.shape[0], times.size - 1))
    for k in range(times.size - 1):
        t0, t1 = times[k], times[k + 1]
        sig = float(vol(0.5 * (t0 + t1)))
        drift = 0.5 * sig * sig * (t1 - t0)
        if measure == "real_world":
            drift -= sig * _integral(lam, t0, t1)
        out[:, k] = (log_s[:, k + 1] - log_s[:, k] - (log_b[:, k + 1] - log_b[:, k]) + drift) / sig
    return out


def driver_increments(model, name: str, times: np.ndarray, cols: dict[str, np.ndarray], *, measure: str) -> np.ndarray:
    """The increments of Gaussian driver ``name`` (the Hull-White driver or a deterministic-
    volatility index) over each output step, in the set's measure."""
    if name == RATES_DRIVER:
        return rates_driver_increments(model, times, cols, measure=measure)
    for part in model.parts:
        if isinstance(part, TotalReturnIndex) and part.name == name:
            return index_driver_increments(model, part, times, cols, measure=measure)
    raise ValueError(f"driver {name!r}: its increments cannot be recovered from the economy's columns")


def projection_noise_rows(model, spec: HestonIndex, times: np.ndarray) -> np.ndarray:
    """``a_k`` ``(K, d)`` with ``sum_j beta_j dB_j = a_k . e_k`` over step ``k`` (``e_k``: the
    economy's state noise, ``d`` states; the deterministic parts aside): the index's projection
    increment as a functional of the step noise, from the joint step moments of the states and
    the projection (:func:`pqflow.models.kernels.grid_moments` with the projection as one more
    row of constant kernels), ``a_k = Cov(e_k)^{-1} Cov(e_k, dP_k)``. ``ValueError`` when the
    projection is not a function of the states (its residual variance is not 0)."""
    from pqflow.models.kernels import Exposure, grid_moments

    exposures = getattr(model, "_exposures", None)
    if exposures is None:
        raise ValueError(f"index {spec.name}: its density block needs a model that lists its states' exposures")
    times = np.asarray(times, dtype=float)
    row = tuple(Exposure(driver=d, kind="one", scale=float(b)) for d, b in spec.loadings)
    cov, _ = grid_moments(times, (*exposures, row), model.correlation, model.driver_names, model.prices_of_risk)
    d = len(exposures)
    a = np.linalg.solve(cov[:, :d, :d], cov[:, :d, d][:, :, None])[:, :, 0]
    residual = cov[:, d, d] - np.einsum("kd,kd->k", a, cov[:, :d, d])
    worst = int(np.argmax(np.abs(residual) / np.maximum(cov[:, d, d], 1e-300)))
    if abs(residual[worst]) > 1e-8 * max(cov[worst, d, d], 1e-300):
        raise ValueError(
            f"index {spec.name}: its projection on {', '.join(n for n, _ in spec.loadings)} is not a function of "
            f"the economy's states over step {worst} (residual variance {residual[worst]:.3g})"
        )
    return a


def simulate_heston_index(
    spec: HestonIndex,
    model,
    times: np.ndarray,
    cols: dict[str, np.ndarray],
    rng: np.random.Generator,
    *,
    measure: str,
    n_paths: int,
    antithetic: bool,
) -> HestonPaths:
    """One Heston index of one batch, conditionally on the economy's columns ``cols``."""
    times = np.asarray(times, dtype=float)
    substeps = heston_substeps(times, spec.substeps_per_year)
    log_cash = np.log(cols["cash_account"])
    carry = np.diff(log_cash, axis=1)
    increments, shift = None, None
    if spec.loadings:
        increments = np.zeros((n_paths, times.size - 1))
        shift = np.zeros((times.size - 1, substeps))
        for name, beta in spec.loadings:
            increments += beta * driver_increments(model, name, times, cols, measure=measure)
            lam = as_schedule(model.prices_of_risk.get(name, 0.0))
            for k in range(times.size - 1):
                h = (times[k + 1] - times[k]) / substeps
                for j in range(substeps):
                    t0 = times[k] + j * h
                    shift[k, j] += beta * _integral(lam, t0, t0 + h)
    return simulate_heston_paths(
        spec.params, times, rng, measure=measure, n_paths=n_paths, substeps=substeps, log_carry=carry,
        prices_of_risk=spec.prices_of_risk, antithetic=antithetic, explained=spec.explained,
        projection_increments=increments, projection_shift=shift,
    )
