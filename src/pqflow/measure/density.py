"""Density weights on the simulated grid, exact for Gaussian transitions.

Over one step both measures give the state increment a Gaussian law with the same covariance
``Sigma = L L^T``; the real-world mean exceeds the market-consistent one by ``m``. Writing the
noise as ``e = L z`` with ``z`` standard normal, and ``eta = L^{-1} m``, the log ratio of the two
transition densities at the simulated increment is

    real-world set (z drawn under P):      log dQ/dP = -eta.z - |eta|^2 / 2,
    market-consistent set (z under Q):     log dP/dQ = +eta.z - |eta|^2 / 2,

which is ``-m^T Sigma^{-1} (y - mu_P) - m^T Sigma^{-1} m / 2`` and its mirror image. Summing over
the steps gives the density of one measure with respect to the other on the information up to
each grid time: exact, not an Euler approximation of the Girsanov exponent.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular

from pqflow.models.base import StepLaw

__all__ = ["density_coefficients", "log_density_increments"]


def density_coefficients(law: StepLaw) -> np.ndarray:
    """``eta = L^{-1} m`` for one step, shape ``(d,)``."""
    return solve_triangular(law.chol, law.real_world_shift, lower=True)


def log_density_increments(z: np.ndarray, eta: np.ndarray, *, measure: str) -> np.ndarray:
    """Per-step log density increments.

    z: standard normals that drove the path, ``(n_paths, n_steps, d)``;
    eta: coefficients per step, ``(n_steps, d)``.
    Returns ``(n_paths, n_steps)``: ``log dQ/dP`` increments in the real-world set,
    ``log dP/dQ`` increments in the market-consistent set.
    """
    linear = np.einsum("nkd,kd->nk", z, eta)
    half_sq = 0.5 * np.einsum("kd,kd->k", eta, eta)
    if measure == "real_world":
        return -linear - half_sq
    if measure == "market_consistent":
        return linear - half_sq
    raise ValueError(f"unknown measure {measure!r}")
