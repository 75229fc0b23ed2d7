"""Change of measure for a Heston index: the prices of risk, the real-world variance and the
density weights of the simulated scheme.

Prices of risk (all proportional to ``sqrt(v)``, the "completely affine" specification). The
index driver is ``B_S = P + s B_perp``: ``P`` its projection on Gaussian drivers of the economy
(:mod:`pqflow.simulation.heston_part`), whose own prices of risk shift it by a deterministic
``mu(t) dt``, and ``B_perp`` independent; the variance's driver is ``W_v = (rho / s) B_perp +
c B_v``. The part shifts only its own shocks:

    dB^Q_perp = dB^P_perp + lambda_perp sqrt(v) dt,     dB^Q_v = dB^P_v + lambda_B sqrt(v) dt,

so that (:func:`heston_prices_of_risk`)

* the index earns ``r - q + sqrt(v) mu(t) + s lambda_perp v`` in the real world: the premium
  its correlated drivers imply plus its own, both vanishing with the variance; ``lambda_perp``
  is set so that the long-run premium is the house view's ``pi``;
* the variance is again Heston in the real world with the same ``kappa theta`` and ``xi``:
  ``kappa^P = kappa - xi lambda_v``, ``lambda_v = (rho / s) lambda_perp + c lambda_B``,
  ``theta^P = kappa theta / kappa^P``, with ``theta^P`` from a house-view real-world long-run
  volatility (default: ``theta``).

Keeping ``kappa theta`` keeps the Feller ratio ``2 kappa theta / xi^2`` and with it the
behaviour at ``v = 0``, so the two laws are equivalent on a finite horizon (the same argument
as for the credit intensities, :mod:`pqflow.measure.cir_density`; Cheridito, Filipovic and
Kimmel, *J. Financial Economics* 83 (2007), reference from memory). Refused forms, with the
reason: a premium that does not vanish with the variance (``lambda = pi / sqrt(v)``, a constant
excess return) needs ``int pi^2 / v dt`` finite, which fails when ``v`` comes near 0 (Novikov's
condition fails; with full truncation ``v`` reaches 0 exactly and the shift is infinite); a
change of ``kappa theta`` (a variance price of risk not proportional to ``sqrt(v)``) makes the
measures singular whenever the variance can reach 0; and a real-world volatility of variance
different from ``xi`` can never be reached by a change of drift.

Density weights of the scheme (:func:`pqflow.simulation.heston_scheme.simulate_heston_paths`): each
substep moves the index and the variance with the part's own independent normals (and the
projection's increments from the economy, whose shift is in the economy's density). Given the
past, the two measures' substep laws are Gaussian with the same covariance and means that
differ by the shifts above, evaluated at the substep's start (predictable). In the independent
normals that is ``eta = sqrt(v^+ h) (lambda_perp, lambda_B)``, plus, for the Brownian bridge
that fills in the projection within an output step, the deterministic shift
``(c_j - mean c) / sqrt(explained h)`` of its normals (``c_j = int mu dt`` over substep ``j``;
zero when ``mu`` is constant over the step). The discretised Girsanov exponent
``log dQ/dP = sum [-eta.z - |eta|^2/2]`` (real-world set, ``z`` drawn under P) or
``log dP/dQ = sum [+eta.z - |eta|^2/2]`` (market-consistent set) is the exact likelihood ratio
of the two discretised chains given the economy, so it multiplies the economy's density. Where
``v^+ = 0`` the shifts vanish.
"""

from __future__ import annotations

import numpy as np

from pqflow.models.heston import HestonPricesOfRisk  # the parameter record; its derivation is here

__all__ = [
    "HestonPricesOfRisk",
    "heston_prices_of_risk",
    "heston_density_coefficients",
    "heston_log_density_increment",
    "stationary_mean_sqrt_variance",
]


def stationary_mean_sqrt_variance(kappa: float, theta: float, xi: float) -> float:
    """``E sqrt(v)`` under the stationary law of the square-root process, a Gamma law of shape
    ``2 kappa theta / xi^2`` and scale ``xi^2 / (2 kappa)`` (Cox, Ingersoll and Ross 1985):
    ``sqrt(scale) Gamma(shape + 1/2) / Gamma(shape)``."""
    from scipy.special import gammaln

    shape = 2.0 * kappa * theta / xi**2
    return float(np.sqrt(xi**2 / (2.0 * kappa)) * np.exp(gammaln(shape + 0.5) - gammaln(shape)))


def heston_prices_of_risk(
    *,
    kappa: float,
    theta: float,
    xi: float,
    equity_risk_premium: float,
    real_world_long_run_volatility: float | None,
    rho: float,
    explained: float = 0.0,
    inherited: float = 0.0,
) -> HestonPricesOfRisk:
    """The prices of risk from the house view.

    The index driver is ``B_S = P + s B_perp`` (``s^2 = 1 - explained``) and the variance's
    ``W_v = (rho / s) B_perp + c B_v``; the economy's prices of risk shift ``P`` by
    ``mu(t) dt`` (``inherited`` is its long-run value ``mu``). The index's own shocks are shifted
    by ``lambda_perp sqrt(v)`` and ``lambda_B sqrt(v)``, so that

        excess return = sqrt(v) mu(t) + s lambda_perp v,
        W_v^Q = W_v^P + lambda_v sqrt(v) dt,  lambda_v = (rho / s) lambda_perp + c lambda_B,

    and the variance stays Heston with ``kappa^P = kappa - xi lambda_v``, ``kappa^P theta^P =
    kappa theta``. ``theta^P`` is ``real_world_long_run_volatility^2`` (``None``: ``theta``);
    ``lambda_perp`` makes the long-run premium the house view's ``pi``:
    ``pi = mu E sqrt(v) + s lambda_perp theta^P`` with ``E sqrt(v)`` stationary under P.
    ``lambda_B`` then follows from ``lambda_v``. Without a projection (``explained = 0``) the
    premium is ``lambda_perp v`` with ``lambda_perp = pi / theta^P``."""
    if not (kappa > 0.0 and theta > 0.0 and xi > 0.0):
        raise ValueError("Heston kappa, theta and xi must be positive")
    if not (0.0 <= explained < 1.0 - rho * rho):
        raise ValueError(f"needs rho^2 + explained < 1, got rho {rho:g} and explained {explained:g}")
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
    s = np.sqrt(1.0 - explained)
    m = stationary_mean_sqrt_variance(kappa_p, theta_p, xi)
    lam_perp = (equity_risk_premium - inherited * m) / (s * theta_p)
    a_v = rho / s
    c_v = np.sqrt(1.0 - a_v * a_v)
    lam_b = (lam_v - a_v * lam_perp) / c_v
    return HestonPricesOfRisk(equity=float(lam_perp), variance=float(lam_b), kappa_real_world=kappa_p,
                              theta_real_world=theta_p)


def heston_density_coefficients(
    lam: HestonPricesOfRisk, variance_plus: np.ndarray, substep: float
) -> tuple[np.ndarray, np.ndarray]:
    """``eta = (eta_perp, eta_B) = sqrt(v^+ h) (lambda_perp, lambda_B)``: the shifts of the
    index's and the variance's own independent normals over one substep, each shaped like
    ``variance_plus`` (the truncated variance at the substep's start)."""
    sq = np.sqrt(np.maximum(variance_plus, 0.0) * substep)
    return lam.equity * sq, lam.variance * sq


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
