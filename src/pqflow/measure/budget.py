"""The density budget: each price of risk's share of the log-density variance, by time.

The density weights degenerate as the log-density's variance grows (for a lognormal weight the
effective sample size share is ``exp(-Var log w)``). This module splits that variance between the
prices of risk that cause it, so a user sees which premium eats the weights.

Gaussian part. Over step ``k`` the real-world mean of the state noise moves by ``m_k`` and the
step covariance is ``Sigma_k`` (:mod:`pqflow.measure.density`); the log density's increment is
``-/+ eta_k . z_k - |eta_k|^2 / 2`` with ``eta_k = L_k^{-1} m_k``, so, the ``eta_k`` being
deterministic,

    Var(log w_t) = sum_{k < t} |eta_k|^2 = sum_{k < t} m_k^T Sigma_k^{-1} m_k

in both sets (the variance of a Gaussian likelihood ratio's log: common practice; Glasserman,
*Monte Carlo Methods in Financial Engineering*, 2003, s. 4.6). The shift is linear in the prices
of risk, ``m_k = sum_j m_k^(j)`` with ``m_k^(j)`` the shift of driver ``j``'s price of risk alone,
and the variance is split Euler-style (as risk contributions are):

    contribution_j(t) = sum_{k < t} m_k^(j)T Sigma_k^{-1} m_k,

which sums to the total; the cross terms ``m^(i)T Sigma^{-1} m^(j)`` are split evenly between
``i`` and ``j``, so a contribution can be negative when two premia offset each other. G2++'s two
rate drivers carry one price of risk (of the short-rate shock) and are reported together as
``rates``.

Credit part (CIR++, :mod:`pqflow.measure.cir_density`). The log density's martingale part has
increments ``-/+ eta_j . z_j`` with ``eta_j = L^{-1} (theta * sqrt(y_j^+)) sqrt(h)``, so its
expected quadratic variation is ``E[sum_j |eta_j|^2] = sum_{r,s} (C^{-1})_{rs} theta_r theta_s
int_0^t E[sqrt(y_r y_s)] du`` (``C`` the ratings' correlation). For a rating alone that is
``theta^2 (C^{-1})_{rr} int_0^t E[y_u] du``, with the square-root factor's mean in closed form,
``E[y_u] = mu + (y_0 - mu) e^{-kappa u}`` under the set's measure (``kappa^P, mu^P`` in the
real-world set, :func:`pqflow.measure.cir_density.real_world_square_root_drift`). Cross terms
between two priced ratings use ``sqrt(E[y_r] E[y_s])`` for ``E[sqrt(y_r y_s)]`` (an upper bound,
Cauchy-Schwarz) and are split evenly. Unlike the Gaussian part the credit coefficients are
random, so this expected quadratic variation (twice the relative entropy) is the leading term of
``Var(log w)``, not all of it (it leaves out the variance of the compensator
``sum |eta|^2 / 2``). The credit and the Gaussian drivers are independent, so the two parts add.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd

from pqflow.measure.cir_density import real_world_square_root_drift
from pqflow.models.cir_credit import CirCreditModel
from pqflow.models.economy import EconomyModel
from pqflow.models.schedule import PiecewiseConstant, as_schedule

__all__ = ["gaussian_log_variance_by_driver", "credit_log_variance_by_rating", "density_budget", "BUDGET_COLUMNS"]

BUDGET_COLUMNS = ["measure", "time", "price_of_risk", "log_variance", "share"]


def _driver_label(driver: str) -> str:
    return "rates" if driver in ("rates_x", "rates_y") else driver


def gaussian_log_variance_by_driver(model: EconomyModel, times: np.ndarray) -> dict[str, np.ndarray]:
    """Contribution of each priced driver to ``Var(log w_t)`` at every time of ``times``
    (``(n_times,)`` each, 0 at time 0); the sum over drivers is the total variance."""
    times = np.asarray(times, dtype=float)
    out: dict[str, np.ndarray] = {}
    if times.size < 2:
        return out
    laws = model.step_laws(times)
    chol = laws.chol
    eta = np.linalg.solve(chol, laws.real_world_shift[..., None])[..., 0]  # L^{-1} m, (K, d)
    groups: dict[str, dict[str, float | PiecewiseConstant]] = {}
    for driver, sched in model.prices_of_risk.items():
        if all(v == 0.0 for v in as_schedule(sched).values):
            continue
        groups.setdefault(_driver_label(driver), {})[driver] = sched
    for label, prices in groups.items():
        own = replace(model, prices_of_risk=prices).step_laws(times).real_world_shift
        eta_j = np.linalg.solve(chol, own[..., None])[..., 0]
        per_step = np.einsum("kd,kd->k", eta_j, eta)
        out[label] = np.concatenate([[0.0], np.cumsum(per_step)])
    return out


def _integrated_mean(kappa: float, mu: float, y0: float, t: np.ndarray) -> np.ndarray:
    """``int_0^t E[y_u] du = mu t + (y0 - mu)(1 - e^{-kappa t}) / kappa``."""
    return mu * t + (y0 - mu) * (-np.expm1(-kappa * t)) / kappa


def credit_log_variance_by_rating(credit: CirCreditModel, times: np.ndarray, *, measure: str) -> dict[str, np.ndarray]:
    """Contribution of each priced rating to the expected quadratic variation of the credit
    log-density at every time of ``times`` under ``measure`` (module docstring)."""
    times = np.asarray(times, dtype=float)
    theta = np.array([r.price_of_risk for r in credit.ratings])
    if not np.any(theta != 0.0):
        return {}
    d = theta.size
    corr = np.eye(d) if credit.correlation is None else np.asarray(credit.correlation, dtype=float)
    inv = np.linalg.inv(corr)
    params = []
    for r in credit.ratings:
        p = r.cir
        if measure == "real_world" and r.price_of_risk != 0.0:
            kappa, mu = real_world_square_root_drift(p.mean_reversion, p.long_run_mean, p.volatility, r.price_of_risk)
        elif measure in ("real_world", "market_consistent"):
            kappa, mu = p.mean_reversion, p.long_run_mean
        else:
            raise ValueError(f"unknown measure {measure!r}")
        params.append((kappa, mu, p.initial))
    fine = np.linspace(0.0, float(times[-1]), max(int(times[-1] * 48), 2) + 1)
    means = np.array([mu + (y0 - mu) * np.exp(-kappa * fine) for kappa, mu, y0 in params])  # (d, n_fine)
    out: dict[str, np.ndarray] = {}
    for a, rating in enumerate(credit.ratings):
        if theta[a] == 0.0:
            continue
        kappa, mu, y0 = params[a]
        total = inv[a, a] * theta[a] ** 2 * _integrated_mean(kappa, mu, y0, times)
        for b in range(d):
            if b == a or theta[b] == 0.0 or inv[a, b] == 0.0:
                continue
            cross = np.sqrt(np.maximum(means[a] * means[b], 0.0))
            integral = np.concatenate([[0.0], np.cumsum(0.5 * (cross[1:] + cross[:-1]) * np.diff(fine))])
            total = total + inv[a, b] * theta[a] * theta[b] * np.interp(times, fine, integral)
        out[f"credit_{rating.name}"] = total
    return out


def density_budget(
    model: EconomyModel, credit: CirCreditModel | None, times_by_measure: dict[str, np.ndarray]
) -> pd.DataFrame:
    """Rows ``(measure, time, price_of_risk, log_variance, share)`` for every time ``> 0`` of
    each set's grid: each price of risk's contribution to the log-density variance and its share
    of the total (NaN where the total is 0)."""
    rows = []
    for measure, times in times_by_measure.items():
        times = np.asarray(times, dtype=float)
        parts = gaussian_log_variance_by_driver(model, times)
        if credit is not None:
            parts.update(credit_log_variance_by_rating(credit, times, measure=measure))
        if not parts:
            continue
        total = sum(parts.values())
        for name, values in parts.items():
            with np.errstate(divide="ignore", invalid="ignore"):
                share = np.where(total > 0, values / np.where(total > 0, total, 1.0), np.nan)
            for k in range(1, times.size):
                rows.append({"measure": measure, "time": float(times[k]), "price_of_risk": name,
                             "log_variance": float(values[k]), "share": float(share[k])})
    return pd.DataFrame(rows, columns=BUDGET_COLUMNS)
