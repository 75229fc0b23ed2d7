"""The credit intensities' scheme: full-truncation Euler paths of the CIR++ factors by rating
(:mod:`pqflow.models.cir_credit` states the scheme, its bias and the closed forms) with their
density weights from the same normals (:mod:`pqflow.measure.cir_density`).

It lives here, above both, because a path set needs the model and its change of measure.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from pqflow.market.curve import DiscountCurve
from pqflow.measure.cir_density import (
    cir_density_coefficients,
    cir_log_density_increment,
    cir_marginal_log_density_increment,
)
from pqflow.models.cir_credit import MEASURES, CirCreditModel, real_world_cir
from pqflow.simulation.engine import run_substeps

__all__ = ["CreditPaths", "simulate_credit"]


@dataclass(frozen=True, kw_only=True)
class CreditPaths:
    """One simulated credit set (``d`` ratings, ``n`` paths, ``n_times`` output times).

    times: ``(n_times,)``; factor: ``y_t = x_t^+``, ``(n, n_times, d)``;
    integrated_factor: trapezoid ``int_0^t y ds`` over the substeps, ``(n, n_times, d)``;
    log_density_increments: per output step, ``(n, n_times - 1)`` (``log dQ/dP`` in the
    real-world set, ``log dP/dQ`` in the market-consistent set);
    density: ``exp`` of their running sums, ``(n, n_times)``, 1 at time 0;
    columns: :meth:`CirCreditModel.columns`, each ``(n, n_times)``;
    rating_density: each rating's own density (its marginal chain's likelihood ratio,
    :func:`pqflow.measure.cir_density.cir_marginal_log_density_increment`), ``(d, n, n_times)``;
    equal to ``density`` for a single rating.
    """

    measure: str
    times: np.ndarray
    factor: np.ndarray
    integrated_factor: np.ndarray
    log_density_increments: np.ndarray
    density: np.ndarray
    columns: dict[str, np.ndarray]
    rating_density: np.ndarray | None = None


class _CreditScheme:
    """The full-truncation Euler substep of every rating at once, with the density increments
    from the same normals (:func:`pqflow.simulation.engine.run_substeps` drives it)."""

    def __init__(self, params: CirCreditModel, times: np.ndarray, n: int, *, measure: str) -> None:
        p_q = [r.cir for r in params.ratings]
        d = len(p_q)
        self.rows = d
        self.measure = measure
        self.kappa_mu = np.array([p.mean_reversion * p.long_run_mean for p in p_q])[:, None]
        if measure == "market_consistent":
            self.kappa_m = np.array([p.mean_reversion for p in p_q])[:, None]
        else:
            self.kappa_m = np.array([real_world_cir(r).mean_reversion for r in params.ratings])[:, None]
        self.nu = np.array([p.volatility for p in p_q])[:, None]
        self.theta = np.array([r.price_of_risk for r in params.ratings])
        self.with_density = bool(np.any(self.theta != 0.0))
        self.chol = params.chol
        self.x = np.repeat(np.array([p.initial for p in p_q])[:, None], n, axis=1)  # (d, n)
        self.yp = self.x.copy()
        self.integ = np.zeros((d, n))
        n_times, n_steps = times.size, times.size - 1
        self.factor = np.empty((n, n_times, d))
        self.integrated = np.empty((n, n_times, d))
        self.log_inc = np.zeros((n, n_steps))
        self.rating_inc = np.zeros((d, n, n_steps)) if self.with_density else None
        self.factor[:, 0, :] = self.yp.T
        self.integrated[:, 0, :] = 0.0
        self.sq = np.empty((d, n))
        self.dw = np.empty((d, n))
        self.sqrt_h = 0.0
        self.step_log = np.zeros(n)
        self.rating_log: np.ndarray | None = None

    def begin_step(self, k: int, h: float, block: np.ndarray) -> None:
        self.sqrt_h = np.sqrt(h)
        self.step_log = np.zeros(self.x.shape[1])
        self.rating_log = np.zeros(self.x.shape) if self.rating_inc is not None else None

    def substep(self, k: int, j: int, h: float, z: np.ndarray) -> None:
        yp, sq, dw = self.yp, self.sq, self.dw
        np.sqrt(yp, out=sq)
        if self.chol is None:
            dw[...] = z
        else:
            np.matmul(self.chol, z, out=dw)
        if self.with_density:
            eta = cir_density_coefficients(self.theta, yp, h, self.chol)
            self.step_log += cir_log_density_increment(z, eta, measure=self.measure)
            if self.rating_log is not None:
                self.rating_log += cir_marginal_log_density_increment(dw, self.theta, yp, h, measure=self.measure)
        # x += (kappa mu - kappa_m y^+) h + nu sqrt(y^+) sqrt(h) dw
        self.x += (self.kappa_mu - self.kappa_m * yp) * h + (self.nu * self.sqrt_h) * sq * dw
        y_new = np.maximum(self.x, 0.0)
        self.integ += (0.5 * h) * (yp + y_new)
        self.yp = y_new

    def end_step(self, k: int) -> None:
        self.factor[:, k + 1, :] = self.yp.T
        self.integrated[:, k + 1, :] = self.integ.T
        self.log_inc[:, k] = self.step_log
        if self.rating_inc is not None and self.rating_log is not None:
            self.rating_inc[:, :, k] = self.rating_log


def simulate_credit(
    params: CirCreditModel,
    times: np.ndarray,
    rng_normals_or_generator: np.random.Generator | np.ndarray,
    *,
    measure: str,
    n_paths: int,
    substeps: int,
    risk_free: DiscountCurve | Mapping[float, np.ndarray] | None = None,
) -> CreditPaths:
    """Simulate the ratings' intensities on ``times`` (start at 0, increasing) under ``measure``
    with the full-truncation Euler scheme on ``substeps`` equal substeps per output step.

    rng_normals_or_generator: a ``numpy.random.Generator`` (draws ``(substeps, d, n_paths)``
    standard normals per output step, in order: the same numbers as one C-order draw of shape
    ``(n_steps * substeps, d, n_paths)``) or that array itself.
    risk_free: as in :meth:`CirCreditModel.columns` (``None``: no ``dzcb`` columns).
    The density weights come from the same normals (:mod:`pqflow.measure.cir_density`); a
    rating with ``price_of_risk = 0`` contributes nothing to them.
    """
    if measure not in MEASURES:
        raise ValueError(f"unknown measure {measure!r}: use one of {MEASURES}")
    if not (isinstance(n_paths, (int, np.integer)) and n_paths > 0):
        raise ValueError("n_paths must be a positive integer")
    if not (isinstance(substeps, (int, np.integer)) and substeps >= 1):
        raise ValueError("substeps must be a positive integer")
    times = np.ascontiguousarray(times, dtype=float)
    if times.ndim != 1 or times.size < 1 or times[0] != 0.0 or np.any(np.diff(times) <= 0.0):
        raise ValueError("times must be a 1-d array that starts at 0 and increases")
    d, n, n_steps = len(params.ratings), int(n_paths), times.size - 1
    if not isinstance(rng_normals_or_generator, np.random.Generator):
        shape = np.shape(rng_normals_or_generator)
        if shape != (n_steps * substeps, d, n):
            raise ValueError(
                f"normals must have shape (n_steps * substeps, n_ratings, n_paths) = "
                f"{(n_steps * substeps, d, n)}, not {shape}"
            )

    scheme = _CreditScheme(params, times, n, measure=measure)
    run_substeps(scheme, times, substeps, rng_normals_or_generator, n_paths=n)
    factor, integrated, log_inc, rating_inc = scheme.factor, scheme.integrated, scheme.log_inc, scheme.rating_inc
    n_times = times.size
    density = np.ones((n, n_times))
    if n_steps:
        density[:, 1:] = np.exp(np.cumsum(log_inc, axis=1))
    rating_density = np.ones((d, n, n_times))
    if rating_inc is not None and n_steps:
        rating_density[:, :, 1:] = np.exp(np.cumsum(rating_inc, axis=2))
    cols = params.columns(times, factor, integrated, risk_free=risk_free)
    return CreditPaths(
        measure=measure,
        times=times,
        factor=factor,
        integrated_factor=integrated,
        log_density_increments=log_inc,
        density=density,
        columns=cols,
        rating_density=rating_density,
    )
