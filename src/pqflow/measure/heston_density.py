"""Change of measure for a Heston index: the prices of risk, the real-world variance and the
density weights of the simulated scheme.

Prices of risk (both proportional to ``sqrt(v)``, the "completely affine" specification):

    dB^Q_S = dB^P_S + lambda_S sqrt(v) dt,     dW^Q_v = dW^P_v + lambda_v sqrt(v) dt,

``B_S`` the index's driver, ``W_v`` the variance's (``d<B_S, W_v> = rho dt``). Then

* the index earns ``r - q + lambda_S v`` in the real world: an equity risk premium proportional
  to the variance. ``lambda_S`` is set so that the premium at the real-world long-run variance
  is the house view's premium ``pi``: ``lambda_S = pi / theta^P``;
* the variance is again Heston in the real world with the same ``kappa theta`` and ``xi``:
  ``dv = [kappa theta - (kappa - xi lambda_v) v] dt + xi sqrt(v) dW^P_v``, i.e.
  ``kappa^P = kappa - xi lambda_v``, ``theta^P = kappa theta / kappa^P``. ``lambda_v`` is set from a
  house-view real-world long-run volatility ``sigma^P``: ``theta^P = (sigma^P)^2``,
  ``lambda_v = (kappa - kappa^P) / xi``.

Keeping ``kappa theta`` keeps the Feller ratio ``2 kappa theta / xi^2`` and with it the
behaviour at ``v = 0``, so the two laws are equivalent on a finite horizon (the same argument
as for the credit intensities, :mod:`pqflow.measure.cir_density`; Cheridito, Filipovic and
Kimmel, *J. Financial Economics* 83 (2007), reference from memory). Refused forms, with the
reason: a premium that does not vanish with the variance (``lambda_S = pi / sqrt(v)``, i.e. a
constant excess return) needs ``int pi^2 / v dt`` finite, which fails when ``v`` comes near 0
(Novikov's condition fails; with full truncation ``v`` reaches 0 exactly and the shift is
infinite); a change of ``kappa theta`` (a variance price of risk not proportional to
``sqrt(v)``) makes the measures singular whenever the variance can reach 0; and a real-world
volatility of variance different from ``xi`` can never be reached by a change of drift.

Density weights of the scheme (:func:`pqflow.models.heston.simulate_heston_paths`): each
substep moves the index and the variance with independent standard normals of this part's own
stream (and, when it correlates with Gaussian drivers, their increments from the economy,
whose own shifts are in the economy's density). Given the past, the two measures' substep laws are Gaussian with the same
covariance and means that differ by the shifts of ``dB_S`` and ``dW_v`` above, evaluated at the
substep's start (a predictable shift). In the independent normals that is the shift ``eta`` of
:func:`heston_density_coefficients` (``sqrt(v^+ h) (lambda_S, (lambda_v - rho lambda_S) /
sqrt(1 - rho^2))`` without rates correlation), plus, for the Brownian bridge that fills in the
projection on the Gaussian drivers within an output step, the deterministic shift
``(c_j - mean c) / sqrt(explained h)`` of its normals (``c_j`` the projection's shift over
substep ``j``; zero when the prices of risk are constant over the step). The discretised Girsanov exponent ``log dQ/dP = sum [-eta.z - |eta|^2/2]`` (real-world set,
``z`` drawn under P) or ``log dP/dQ = sum [+eta.z - |eta|^2/2]`` (market-consistent set) is the
exact likelihood ratio of the two discretised chains. Where ``v^+ = 0`` both shifts vanish.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["HestonPricesOfRisk", "heston_prices_of_risk", "heston_density_coefficients", "heston_log_density_increment"]


@dataclass(frozen=True, kw_only=True)
class HestonPricesOfRisk:
    """``lambda_S`` and ``lambda_v`` (both multiply ``sqrt(v)``), with the real-world
    ``kappa^P`` and ``theta^P`` they imply."""

    equity: float
    variance: float
    kappa_real_world: float
    theta_real_world: float


def heston_prices_of_risk(
    *, kappa: float, theta: float, xi: float, equity_risk_premium: float, real_world_long_run_volatility: float | None
) -> HestonPricesOfRisk:
    """The prices of risk of the module docstring from the house view: an equity risk premium
    ``pi`` at the real-world long-run variance, and a real-world long-run volatility (``None``:
    the market-consistent ``sqrt(theta)``, no variance price of risk).

    (A default that cancels the variance shock's own shift was tried and rejected: through
    ``lambda_S = pi / theta^P`` it lowers ``theta^P`` and raises ``lambda_S`` so much that the
    density's variance grows, not shrinks, on the demo.)"""
    if not (kappa > 0.0 and theta > 0.0 and xi > 0.0):
        raise ValueError("Heston kappa, theta and xi must be positive")
    if real_world_long_run_volatility is None:
        theta_p = theta
    else:
        if not real_world_long_run_volatility > 0.0:
            raise ValueError(
                f"real-world long-run volatility {real_world_long_run_volatility!r} must be positive: a zero "
                "long-run variance would need an infinite variance price of risk"
            )
        theta_p = real_world_long_run_volatility**2
    kappa_p = kappa * theta / theta_p
    lam_v = (kappa - kappa_p) / xi
    return HestonPricesOfRisk(equity=equity_risk_premium / theta_p, variance=lam_v, kappa_real_world=kappa_p,
                              theta_real_world=theta_p)


def heston_density_coefficients(
    lam: HestonPricesOfRisk,
    rho: float,
    variance_plus: np.ndarray,
    substep: float,
    *,
    explained: float = 0.0,
    projection_shift: float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """``eta = (eta_perp, eta_v)`` of one substep, each shaped like ``variance_plus`` (the
    truncated variance at the substep's start).

    The index driver is ``B_S = P + s B_perp`` (``P`` its projection on Gaussian drivers,
    ``s^2 = 1 - explained``) and the variance's ``W_v = (rho / s) B_perp + c B_v``
    (:func:`pqflow.models.heston.simulate_heston_paths`); the economy shifts ``P`` by
    ``projection_shift = sum_j beta_j int lambda_j dt`` over the substep. For ``B_S`` to be
    shifted by ``lambda_S sqrt(v) h`` and ``W_v`` by ``lambda_v sqrt(v) h``, the independent
    normals shift by

        eta_perp = (lambda_S sqrt(v) h - projection_shift) / (s sqrt(h)),
        eta_v    = (lambda_v sqrt(v) sqrt(h) - (rho / s) eta_perp) / c.

    Without projection this is ``sqrt(v h) (lambda_S, (lambda_v - rho lambda_S) / sqrt(1 - rho^2))``.
    The part ``projection_shift`` is bounded and deterministic (it does not affect
    equivalence)."""
    sq = np.sqrt(np.maximum(variance_plus, 0.0))
    s_perp = np.sqrt(1.0 - explained)
    a_v = rho / s_perp
    c_v = np.sqrt(1.0 - a_v * a_v)
    sqrt_h = np.sqrt(substep)
    eta_perp = (lam.equity * sq * substep - projection_shift) / (s_perp * sqrt_h)
    eta_v = (lam.variance * sq * sqrt_h - a_v * eta_perp) / c_v
    return eta_perp, eta_v


def heston_log_density_increment(z_s, z_perp, eta_s, eta_perp, *, measure: str) -> np.ndarray:
    """One substep's log density increment from the normals that drove it: ``log dQ/dP`` in
    the real-world set, ``log dP/dQ`` in the market-consistent set."""
    linear = eta_s * z_s + eta_perp * z_perp
    half_sq = 0.5 * (eta_s * eta_s + eta_perp * eta_perp)
    if measure == "real_world":
        return -linear - half_sq
    if measure == "market_consistent":
        return linear - half_sq
    raise ValueError(f"unknown measure {measure!r}")
