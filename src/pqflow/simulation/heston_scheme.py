"""The scheme of a Heston index: full-truncation substeps of its variance and log-Euler steps of
the index (:func:`simulate_heston_paths`), with the density weights of the scheme from the same
normals (:mod:`pqflow.measure.heston_density`). The model, its closed forms and parameters:
:mod:`pqflow.models.heston`; a run's Heston index on the economy: :mod:`pqflow.simulation.heston_part`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from pqflow.measure.heston_density import heston_density_coefficients, heston_log_density_increment
from pqflow.models.heston import HestonParams
from pqflow.simulation.engine import run_substeps

__all__ = ["HestonPaths", "simulate_heston_paths"]


@dataclass(frozen=True, kw_only=True)
class HestonPaths:
    """One simulated Heston index (``n`` paths, ``n_times`` output times).

    log_return: ``ln(S_t / S_0)`` of the total-return index, ``(n, n_times)``; variance: ``v^+``
    at the output times, ``(n, n_times)``; log_density: the running sum of the scheme's log
    likelihood ratio (``log dQ/dP`` real world, ``log dP/dQ`` market consistent), ``(n, n_times)``.
    """

    log_return: np.ndarray
    variance: np.ndarray
    log_density: np.ndarray


class _HestonScheme:
    """One substep of the index and its variance with the density increments from the same
    normals (:func:`simulate_heston_paths` states the scheme; :func:`pqflow.simulation.engine.run_substeps`
    drives it)."""

    def __init__(
        self, p: HestonParams, n_paths: int, n_times: int, *, measure: str, log_carry: np.ndarray,
        prices_of_risk, explained: float, projection: np.ndarray, shift: np.ndarray,
    ) -> None:
        self.p = p
        self.measure = measure
        self.log_carry = log_carry
        self.proj = projection
        self.shift = shift
        self.with_rates = explained != 0.0
        lam = self.lam = prices_of_risk
        self.real = measure == "real_world"
        self.kappa_m = lam.kappa_real_world if (self.real and lam is not None) else p.kappa
        self.lam_s = np.sqrt(1.0 - explained) * lam.equity if (self.real and lam is not None) else 0.0
        self.kappa_theta = p.kappa * p.theta
        self.s_perp = np.sqrt(1.0 - explained)
        self.s_proj = np.sqrt(explained)
        self.a_v = p.rho / self.s_perp
        self.c_v = np.sqrt(1.0 - self.a_v * self.a_v)
        self.rows = 3 if self.with_rates else 2
        self.x = np.full(n_paths, p.v0)
        self.vp = self.x.copy()
        self.lnS = np.zeros(n_paths)
        self.logw = np.zeros(n_paths)
        self.out_s = np.zeros((n_paths, n_times))
        self.out_v = np.empty((n_paths, n_times))
        self.out_w = np.zeros((n_paths, n_times))
        self.out_v[:, 0] = self.vp
        self.sqrt_h = 0.0
        self.carry = np.zeros(n_paths)
        self.block = np.empty((0, self.rows, n_paths))
        self.bridge = np.empty((0, n_paths))
        self.c_shift = np.zeros(0)

    def begin_step(self, k: int, h: float, block: np.ndarray) -> None:
        substeps = block.shape[0]
        self.sqrt_h = np.sqrt(h)
        self.block = block
        self.carry = self.log_carry[:, k] / substeps
        if self.with_rates:
            u = block[:, 2, :]
            self.bridge = self.proj[:, k] / substeps + self.s_proj * self.sqrt_h * (u - u.mean(axis=0))
            self.c_shift = self.shift[k] - self.shift[k].mean()  # the bridge's own shift between the measures

    def substep(self, k: int, j: int, h: float, z: np.ndarray) -> None:
        p, lam, measure, sqrt_h, vp = self.p, self.lam, self.measure, self.sqrt_h, self.vp
        zp, zv = z[0], z[1]
        sq = np.sqrt(vp)
        if lam is not None:
            es, ep = heston_density_coefficients(lam, vp, h)
            self.logw += heston_log_density_increment(zp, zv, es, ep, measure=measure)
            if self.with_rates and self.c_shift[j] != 0.0:
                eu = self.c_shift[j] / (self.s_proj * sqrt_h)
                self.logw += heston_log_density_increment(z[2], 0.0, eu, 0.0, measure=measure)
        d_bs = self.s_perp * sqrt_h * zp
        if self.with_rates:
            d_bs = d_bs + self.bridge[j]
        premium = (self.lam_s * vp + sq * (self.shift[k, j] / h)) * h if (self.real and lam is not None) else 0.0
        self.lnS += self.carry + premium - 0.5 * vp * h + sq * d_bs
        self.x += (self.kappa_theta - self.kappa_m * vp) * h + p.xi * sq * sqrt_h * (self.a_v * zp + self.c_v * zv)
        self.vp = np.maximum(self.x, 0.0)

    def end_step(self, k: int) -> None:
        self.out_s[:, k + 1] = self.lnS
        self.out_v[:, k + 1] = self.vp
        self.out_w[:, k + 1] = self.logw


def simulate_heston_paths(
    p: HestonParams,
    times: np.ndarray,
    rng: np.random.Generator,
    *,
    measure: str,
    n_paths: int,
    substeps: int,
    log_carry: np.ndarray,
    prices_of_risk=None,
    antithetic: bool = False,
    explained: float = 0.0,
    projection_increments: np.ndarray | None = None,
    projection_shift: np.ndarray | None = None,
) -> HestonPaths:
    """The Heston index on ``times`` with ``substeps`` equal substeps per output step.

    Drivers. The index's driver is ``B_S = P + s B_perp``: ``P = sum_j beta_j B_j`` its
    projection on Gaussian drivers of the economy (variance ``explained = 1 - s^2`` per year) and
    ``B_perp`` independent of every Gaussian driver; the variance's driver is
    ``W_v = (rho / s) B_perp + c B_v`` (``c = sqrt(1 - rho^2 / s^2)``), so that
    ``corr(B_S, W_v) = rho``, ``corr(B_S, B_j)`` is the configured correlation and
    ``corr(W_v, B_j) = 0`` for every Gaussian driver. ``projection_increments`` ``(n, n_steps)``:
    ``P``'s increment over each output step (in the set's measure, from the economy); within the
    step ``P`` is filled in by a Brownian bridge from this part's own normals ``u_j``:
    ``dP_j = dP / m + sqrt(explained h) (u_j - mean(u))`` (exact in law for Brownian increments
    given their sum).

    Scheme (full truncation for the variance, Lord, Koekkoek and van Dijk, *Quantitative Finance*
    10 (2010); log-Euler for the index), per substep ``h`` with independent normals
    ``(z_perp, z_v[, u])`` from ``rng`` (drawn as ``(substeps, 2 or 3, n)`` per output step):

        dB_S = dP_j + s sqrt(h) z_perp,   dW_v = sqrt(h) ((rho / s) z_perp + c z_v),
        ln S += carry_k h / Dt_k + (sqrt(v^+) mu_j + s lambda_perp v^+) h - v^+ h / 2 + sqrt(v^+) dB_S,
        x    += (kappa theta - kappa_m v^+) h + xi sqrt(v^+) dW_v,     v^+ = max(x, 0),

    ``kappa_m = kappa`` (market consistent) or ``kappa^P`` (real world); the premium term
    (:mod:`pqflow.measure.heston_density`, ``mu_j`` the projection's shift per year over the
    substep) only in the real-world set; ``S`` is the total-return index (income reinvested; the price index
    is ``S e^{-qt}``). ``log_carry``: ``(n, n_steps)``, the log growth of the cash account over
    each output step, ``int r dt`` (from the economy's cash account, or deterministic), spread
    evenly over the substeps (the deflated index does not depend on it). ``projection_shift``
    ``(n_steps, substeps)``: ``sum_j beta_j int lambda_j dt`` over each substep, the real-world
    shift the economy gives ``P`` (``dB^Q_j = dB^P_j + lambda_j dt``).
    ``prices_of_risk``: :class:`pqflow.measure.heston_density.HestonPricesOfRisk` (``None``: no
    change of measure, density 1). The deflated index ``S_t / B_t`` is a martingale of the
    scheme in the market-consistent set: each substep's factor ``exp(sqrt(v^+) dB_S - v^+ h / 2)``
    has conditional mean 1 because ``v^+`` is known at the substep's start.

    Antithetic: paths ``(2j, 2j+1)`` use ``z`` and ``-z`` (and the economy's mirrored drivers);
    the partner is simulated (the scheme is not linear in ``z``), not mirrored.
    """
    if measure not in ("real_world", "market_consistent"):
        raise ValueError(f"unknown measure {measure!r}")
    times = np.ascontiguousarray(times, dtype=float)
    n_steps = times.size - 1
    if log_carry.shape != (n_paths, n_steps):
        raise ValueError(f"log_carry must have shape {(n_paths, n_steps)}, not {log_carry.shape}")
    if antithetic and n_paths % 2:
        raise ValueError("antithetic sampling needs an even number of paths")
    with_rates = explained != 0.0
    if with_rates and (projection_increments is None or projection_increments.shape != (n_paths, n_steps)):
        raise ValueError(f"a projection on the economy needs projection_increments of shape {(n_paths, n_steps)}")
    proj = projection_increments if projection_increments is not None else np.empty((0, 0))  # read with rates only
    shift = np.zeros((n_steps, substeps)) if projection_shift is None else np.asarray(projection_shift, dtype=float)
    if shift.shape != (n_steps, substeps):
        raise ValueError(f"projection_shift must have shape {(n_steps, substeps)}, not {shift.shape}")
    if not (0.0 <= explained < 1.0 and p.rho**2 < 1.0 - explained):
        raise ValueError(f"needs 0 <= explained < 1 - rho^2, got explained {explained!r} and rho {p.rho!r}")
    scheme = _HestonScheme(
        p, n_paths, n_steps + 1, measure=measure, log_carry=log_carry, prices_of_risk=prices_of_risk,
        explained=explained, projection=proj, shift=shift,
    )
    run_substeps(scheme, times, substeps, rng, n_paths=n_paths, antithetic=antithetic)
    out_s, out_v, out_w = scheme.out_s, scheme.out_v, scheme.out_w
    return HestonPaths(log_return=out_s, variance=out_v, log_density=out_w)
