"""Change of measure for square-root (CIR) factors: price of risk, real-world drift and the
density weights of a full-truncation Euler scheme.

Price of risk. For a factor ``dy = kappa (mu - y) dt + nu sqrt(y) dW^Q`` we take the market
price of risk proportional to the square root of the factor,

    lambda(t, y) = theta sqrt(y),        W^Q_t = W^P_t + int_0^t lambda ds,

so that (drift under P = drift under Q + volatility x price of risk)

    dy = [kappa mu - (kappa - nu theta) y] dt + nu sqrt(y) dW^P = kappa^P (mu^P - y) dt + ...,
    kappa^P = kappa - nu theta,   mu^P = kappa mu / kappa^P.

The real-world process is again CIR with the same volatility and the same ``kappa mu``. The
second point matters: the boundary behaviour at 0 is set by ``2 kappa mu / nu^2`` (the Feller
ratio), which is the same under both measures, so the two laws are equivalent on a finite
horizon. (This is the "completely affine" specification; for affine models it gives a true
martingale density: Cheridito, Filipovic and Kimmel, "Market price of risk specifications for
affine models", *J. Financial Economics* 83 (2007); reference from memory.) A specification
that changed ``kappa mu`` would make the measures singular whenever the process can reach 0.
``theta < 0`` gives a real-world intensity below the market-consistent one (``mu^P < mu``), the
usual case for credit.

Density weights. The scheme (Lord, Koekkoek and van Dijk, "A comparison of biased simulation
schemes for stochastic volatility models", *Quantitative Finance* 10 (2010), full truncation)
moves the un-truncated variable ``x`` over a substep of length ``h`` as

    x_{j+1} = x_j + (kappa mu - kappa_m x_j^+) h + nu sqrt(x_j^+) sqrt(h) (L z_j)_r,   y = x^+,

with ``kappa_m = kappa`` under Q and ``kappa^P`` under P, ``z_j`` independent standard normals
(one per factor) and ``L`` the Cholesky factor of the factors' correlation. Given the past, the
two measures' transitions are Gaussian with the same covariance and means that differ by
``m = nu theta x^+ h`` per factor. In the independent normals that is a shift
``eta_j = L^{-1} (theta * sqrt(x_j^+)) sqrt(h)`` of ``z_j``, so the discretised Girsanov exponent
evaluated with the normals that drove the path,

    real-world set (z drawn under P):      log dQ/dP = sum_j [-eta_j . z_j - |eta_j|^2 / 2],
    market-consistent set (z under Q):     log dP/dQ = sum_j [+eta_j . z_j - |eta_j|^2 / 2],

is the exact likelihood ratio of the two *discretised* chains (the shift is predictable: it
uses the state at the start of the substep). Reweighting therefore carries no bias of its own:
a reweighted set reproduces the other measure's expectations of the same scheme, and only the
scheme's discretisation bias (stated in :mod:`pqflow.models.cir_credit`) separates either from
the continuous-time model. Where the factor is truncated at 0 the diffusion vanishes, the
drifts of both measures agree (``m = 0``) and so does ``eta``: the exponent needs no division by
``sqrt(y)`` and no special case.
"""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_triangular

from pqflow.models.cir_credit import real_world_square_root_drift

__all__ = [
    "real_world_square_root_drift",
    "price_of_risk_for_long_run_mean",
    "cir_density_coefficients",
    "cir_log_density_increment",
    "cir_marginal_log_density_increment",
]


def price_of_risk_for_long_run_mean(
    mean_reversion: float, long_run_mean: float, volatility: float, *, real_world_mean: float
) -> float:
    """``theta`` such that the real-world long-run mean of the factor is ``real_world_mean``:
    ``kappa^P = kappa mu / mu^P`` and ``theta = (kappa - kappa^P) / nu``."""
    if not volatility > 0.0:
        raise ValueError("a price of risk needs a positive volatility (with nu = 0 the measures agree)")
    if not (mean_reversion > 0.0 and long_run_mean > 0.0 and real_world_mean > 0.0):
        raise ValueError("mean reversion and both long-run means must be positive")
    kappa_p = mean_reversion * long_run_mean / real_world_mean
    return (mean_reversion - kappa_p) / volatility


def cir_density_coefficients(
    price_of_risk: np.ndarray,
    factor_plus: np.ndarray,
    substep: float,
    chol: np.ndarray | None = None,
) -> np.ndarray:
    """``eta = L^{-1} (theta * sqrt(y^+)) sqrt(h)`` for one substep.

    price_of_risk: ``theta`` per factor, shape ``(d,)``; factor_plus: truncated factor ``y^+``
    at the start of the substep, ``(d, n_paths)``; chol: lower Cholesky factor ``L`` of the
    factors' correlation, ``(d, d)`` (``None``: independent factors).
    Returns ``(d, n_paths)``.
    """
    lam = np.asarray(price_of_risk, dtype=float)[:, None] * np.sqrt(np.maximum(factor_plus, 0.0))
    lam *= np.sqrt(substep)
    if chol is None:
        return lam
    return solve_triangular(chol, lam, lower=True)


def cir_log_density_increment(z: np.ndarray, eta: np.ndarray, *, measure: str) -> np.ndarray:
    """Log density increment of one substep, shape ``(n_paths,)``, from the independent normals
    ``z`` that drove it and their coefficients ``eta`` (both ``(d, n_paths)``): ``log dQ/dP`` in
    the real-world set, ``log dP/dQ`` in the market-consistent set."""
    linear = np.einsum("dn,dn->n", eta, z)
    half_sq = 0.5 * np.einsum("dn,dn->n", eta, eta)
    if measure == "real_world":
        return -linear - half_sq
    if measure == "market_consistent":
        return linear - half_sq
    raise ValueError(f"unknown measure {measure!r}")


def cir_marginal_log_density_increment(
    noise: np.ndarray, price_of_risk: np.ndarray, factor_plus: np.ndarray, substep: float, *, measure: str
) -> np.ndarray:
    """Each rating's own log density increment over one substep, ``(d, n_paths)``: the
    likelihood ratio of that rating's marginal Euler chain alone (its drift reads only itself,
    so one rating is an autonomous block, :mod:`pqflow.measure.blocks`).

    noise: the rating's correlated unit-variance normal ``w = (L z)_r`` that moved it,
    ``(d, n_paths)``; its shift between the measures is ``lambda_r = theta_r sqrt(y_r^+ h)``, so
    ``log dQ/dP = -lambda_r w_r - lambda_r^2 / 2`` in the real-world set and the mirror image in
    the market-consistent set. With independent ratings the sum over ratings is
    :func:`cir_log_density_increment`.
    """
    lam = np.asarray(price_of_risk, dtype=float)[:, None] * np.sqrt(np.maximum(factor_plus, 0.0) * substep)
    half_sq = 0.5 * lam * lam
    if measure == "real_world":
        return -lam * noise - half_sq
    if measure == "market_consistent":
        return lam * noise - half_sq
    raise ValueError(f"unknown measure {measure!r}")
