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

__all__ = ["density_coefficients", "log_density_increments", "signed_coefficients", "accumulate_exponent", "deflator"]


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


def signed_coefficients(coef: np.ndarray, measure: str) -> np.ndarray:
    """The coefficients as they enter the exponent of ``measure``'s set: ``-eta`` in the
    real-world set (``log dQ/dP = -eta.z - ...``), ``+eta`` in the market-consistent set."""
    if measure == "real_world":
        return -coef
    if measure == "market_consistent":
        return coef
    raise ValueError(f"unknown measure {measure!r}")


def accumulate_exponent(signed: np.ndarray, z: np.ndarray, running: np.ndarray) -> None:
    """Running sums of the exponent's linear part over a block of ``b`` steps, in place.

    signed: signed coefficients of the block's steps, ``(b, k, d)`` for ``k`` densities at
    once (the full one, or several restricted blocks); z: the steps' normals ``(b, d, n)``;
    running: ``(b + 1, k, n)`` with the sum up to the block's start in ``running[0]``; on return
    ``running[j]`` holds the sum up to step ``j`` of the block. The log density at a grid time
    is the running sum minus the running sum of ``|coef|^2 / 2``.
    """
    np.matmul(signed, z, out=running[1:])
    np.add.accumulate(running, axis=0, out=running)


def deflator(measure: str, density: np.ndarray, cash_account: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """The state-price deflator of a set: ``density / cash_account`` in the real-world set
    (``q_density = dQ/dP``), ``1 / cash_account`` in the market-consistent set."""
    if out is None:
        out = np.empty(np.shape(cash_account))
    if measure == "real_world":
        return np.divide(density, cash_account, out=out)
    if measure == "market_consistent":
        return np.divide(1.0, cash_account, out=out)
    raise ValueError(f"unknown measure {measure!r}")
