"""Control variates from known martingales, with cross-fitted coefficients.

Deflated traded assets have known expectations in both sets: the density ``E[w_t] = 1``, the
deflator ``E[D_t] = P(0, t)``, every index ``E[D_t S_t] = S_0`` and every bond
``E[D_t P(t, T)] = P(0, T)`` (``D_t = w_t / B_t`` in the real-world set, ``1 / B_t`` in the
market-consistent set). For an estimate of ``E[Y]`` from sampling units ``Y_i`` with controls
``C_i`` of known mean ``mu``, the regression estimator (Glasserman, *Monte Carlo Methods in
Financial Engineering*, 2003, section 4.1)

    mean_i [ Y_i - beta^T (C_i - mu) ]

has, with the variance-minimising ``beta = Cov(C)^{-1} Cov(C, Y)``, variance
``(1 - R^2) Var(Y) / n``. Estimating ``beta`` on the same units biases the estimate by
``O(1/n)`` (the estimated ``beta`` is correlated with ``mean(C) - mu``). Here ``beta`` is
*cross-fitted*: the units are split into two halves by position (even and odd), each half's
residuals use the ``beta`` fitted on the other half, so ``beta`` is independent of the controls
it multiplies and the estimator is exactly unbiased; the cost is a slightly less precise
``beta``, negligible for a handful of controls and hundreds of units. The standard error is that
of the residuals' mean (each half's ``beta`` treated as fixed), which is what the tests check
over many seeds. With fewer than ``MIN_UNITS_PER_CONTROL`` units per control (per half) the
controls are not used and the plain mean is returned.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ControlledMean", "controlled_mean", "summed", "MIN_UNITS_PER_CONTROL"]

#: fewest sampling units per control in each half for the regression to be used
MIN_UNITS_PER_CONTROL = 20


@dataclass(frozen=True, kw_only=True)
class ControlledMean:
    """Estimates of ``E[Y]`` for ``q`` quantities, with and without the controls.

    value, std_error: with the controls, ``(q,)``; plain_value, plain_std_error: the plain
    sample mean and its standard error, ``(q,)``; used: whether the controls were applied;
    residuals: the controlled sampling units ``(n_units, q)`` (their mean is ``value``): sums of
    residuals of several estimates are the residuals of the sum, which keeps totals additive.
    """

    value: np.ndarray
    std_error: np.ndarray
    plain_value: np.ndarray
    plain_std_error: np.ndarray
    used: bool
    n_controls: int
    residuals: np.ndarray

    @property
    def se_ratio(self) -> np.ndarray:
        """Standard error with the controls over the plain one (below 1: a reduction)."""
        return np.divide(self.std_error, self.plain_std_error, out=np.ones_like(self.std_error),
                         where=self.plain_std_error > 0)


def _beta(y: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Least-squares coefficients of ``y`` ``(n, q)`` on ``c`` ``(n, k)`` with an intercept."""
    yc = y - y.mean(axis=0)
    cc = c - c.mean(axis=0)
    beta, *_ = np.linalg.lstsq(cc, yc, rcond=None)
    return beta  # (k, q)


def controlled_mean(y: np.ndarray, controls: np.ndarray, control_means: np.ndarray) -> ControlledMean:
    """Cross-fitted control-variate estimate of the mean of each column of ``y``.

    y: ``(n_units, q)`` sampling units (antithetic pairs already averaged); controls:
    ``(n_units, k)`` on the same units; control_means: their known expectations ``(k,)``.
    Controls that do not vary (e.g. a deflator that is exact under antithetic sampling) are
    dropped. NaN anywhere raises ``ValueError``.
    """
    y = np.asarray(y, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    c = np.asarray(controls, dtype=float)
    if c.ndim == 1:
        c = c[:, None]
    mu = np.asarray(control_means, dtype=float).reshape(-1)
    n = y.shape[0]
    if c.shape[0] != n or c.shape[1] != mu.size:
        raise ValueError("controls must be (n_units, k) with k known means, on the same units as y")
    if not (np.all(np.isfinite(y)) and np.all(np.isfinite(c)) and np.all(np.isfinite(mu))):
        raise ValueError("control-variate inputs must be finite")
    plain = y.mean(axis=0)
    plain_se = y.std(axis=0, ddof=1) / np.sqrt(n) if n > 1 else np.zeros(y.shape[1])
    spread = c.std(axis=0)
    keep = spread > 1e-12 * np.maximum(np.abs(mu), 1.0)
    c, mu = c[:, keep], mu[keep]
    k = c.shape[1]
    if k == 0 or n // 2 < MIN_UNITS_PER_CONTROL * k:
        return ControlledMean(value=plain, std_error=plain_se, plain_value=plain, plain_std_error=plain_se,
                              used=False, n_controls=0, residuals=y)
    halves = (np.arange(n) % 2 == 0, np.arange(n) % 2 == 1)
    residual = np.empty_like(y)
    for this, other in (halves, halves[::-1]):
        beta = _beta(y[other], c[other])
        residual[this] = y[this] - (c[this] - mu) @ beta
    value = residual.mean(axis=0)
    se = residual.std(axis=0, ddof=1) / np.sqrt(n)
    return ControlledMean(value=value, std_error=se, plain_value=plain, plain_std_error=plain_se,
                          used=True, n_controls=k, residuals=residual)


def summed(residuals: np.ndarray, membership: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Means and standard errors of sums of estimates: ``residuals`` ``(n_units, m, q)`` of
    ``m`` estimates, ``membership`` ``(g, m)`` (which estimates each of ``g`` lines sums).
    Returns ``(value, std_error)``, each ``(g, q)``."""
    lines = np.einsum("gm,nmq->ngq", membership, residuals)
    n = lines.shape[0]
    return lines.mean(axis=0), (lines.std(axis=0, ddof=1) / np.sqrt(n) if n > 1 else np.zeros(lines.shape[1:]))
