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
    normals = np.empty((0, d, n))  # read only when no generator is given
    if isinstance(rng_normals_or_generator, np.random.Generator):
        rng = rng_normals_or_generator
    else:
        rng = None
        normals = np.asarray(rng_normals_or_generator, dtype=float)
        if normals.shape != (n_steps * substeps, d, n):
            raise ValueError(
                f"normals must have shape (n_steps * substeps, n_ratings, n_paths) = "
                f"{(n_steps * substeps, d, n)}, not {normals.shape}"
            )

    p_q = [r.cir for r in params.ratings]
    kappa_mu = np.array([p.mean_reversion * p.long_run_mean for p in p_q])[:, None]
    if measure == "market_consistent":
        kappa_m = np.array([p.mean_reversion for p in p_q])[:, None]
    else:
        kappa_m = np.array([real_world_cir(r).mean_reversion for r in params.ratings])[:, None]
    nu = np.array([p.volatility for p in p_q])[:, None]
    theta = np.array([r.price_of_risk for r in params.ratings])
    with_density = bool(np.any(theta != 0.0))
    chol = params.chol

    x = np.repeat(np.array([p.initial for p in p_q])[:, None], n, axis=1)  # (d, n)
    yp = x.copy()
    integ = np.zeros((d, n))
    n_times = times.size
    factor = np.empty((n, n_times, d))
    integrated = np.empty((n, n_times, d))
    log_inc = np.zeros((n, n_steps))
    rating_inc = np.zeros((d, n, n_steps)) if with_density else None
    factor[:, 0, :] = yp.T
    integrated[:, 0, :] = 0.0
    sq = np.empty((d, n))
    dw = np.empty((d, n))
    for k in range(n_steps):
        h = (times[k + 1] - times[k]) / substeps
        sqrt_h = np.sqrt(h)
        if rng is not None:
            block = rng.standard_normal((substeps, d, n))
        else:
            block = normals[k * substeps : (k + 1) * substeps]
        step_log = np.zeros(n)
        rating_log = np.zeros((d, n)) if rating_inc is not None else None
        for j in range(substeps):
            z = block[j]
            np.sqrt(yp, out=sq)
            if chol is None:
                dw[...] = z
            else:
                np.matmul(chol, z, out=dw)
            if with_density:
                eta = cir_density_coefficients(theta, yp, h, chol)
                step_log += cir_log_density_increment(z, eta, measure=measure)
                if rating_log is not None:
                    rating_log += cir_marginal_log_density_increment(dw, theta, yp, h, measure=measure)
            # x += (kappa mu - kappa_m y^+) h + nu sqrt(y^+) sqrt(h) dw
            x += (kappa_mu - kappa_m * yp) * h + (nu * sqrt_h) * sq * dw
            y_new = np.maximum(x, 0.0)
            integ += (0.5 * h) * (yp + y_new)
            yp = y_new
        factor[:, k + 1, :] = yp.T
        integrated[:, k + 1, :] = integ.T
        log_inc[:, k] = step_log
        if rating_inc is not None:
            rating_inc[:, :, k] = rating_log
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
