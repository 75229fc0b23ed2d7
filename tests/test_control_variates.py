"""Control variates with cross-fitted coefficients (pqflow.validation.control_variates).

Source: Glasserman, *Monte Carlo Methods in Financial Engineering* (2003), ch. 4.1: the
regression estimator ``mean(Y - beta (C - mu))`` has variance ``(1 - R^2) Var(Y) / n`` for the
optimal ``beta``; estimating ``beta`` on the same draws biases it by ``O(1/n)``. Reference
values: the Black-Scholes call (Black and Scholes 1973) through scipy.stats.norm.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import norm

from pqflow.validation.control_variates import controlled_mean

S0, K, SIGMA, T = 100.0, 110.0, 0.25, 1.0  # zero rates: E[S_T] = S0 (invented example)


def _call() -> float:
    d1 = (np.log(S0 / K) + 0.5 * SIGMA**2 * T) / (SIGMA * np.sqrt(T))
    return float(S0 * norm.cdf(d1) - K * norm.cdf(d1 - SIGMA * np.sqrt(T)))


def _draw(rng: np.random.Generator, reps: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    s_t = S0 * np.exp(-0.5 * SIGMA**2 * T + SIGMA * np.sqrt(T) * rng.standard_normal((reps, n)))
    return np.maximum(s_t - K, 0.0), s_t


def test_cross_fitted_estimator_is_unbiased_and_its_standard_error_honest():
    """Over 2,000 independent data sets of 200 units: the mean of the estimates equals the
    Black-Scholes value within 4 standard errors of that mean, the reported standard error
    matches the estimates' spread (within 10%), and the variance falls by the regression's
    factor (measured, printed)."""
    rng = np.random.default_rng(2024)
    reps, n = 2000, 200
    pay, s_t = _draw(rng, reps, n)
    est, se, plain, plain_se = (np.empty(reps) for _ in range(4))
    for i in range(reps):
        r = controlled_mean(pay[i][:, None], s_t[i][:, None], np.array([S0]))
        est[i], se[i], plain[i], plain_se[i] = r.value[0], r.std_error[0], r.plain_value[0], r.plain_std_error[0]
    truth = _call()
    assert abs(est.mean() - truth) < 4 * est.std(ddof=1) / np.sqrt(reps), (est.mean(), truth)
    assert abs(plain.mean() - truth) < 4 * plain.std(ddof=1) / np.sqrt(reps)
    assert se.mean() == pytest.approx(est.std(ddof=1), rel=0.10)
    ratio = est.std(ddof=1) / plain.std(ddof=1)
    rho = np.corrcoef(pay.ravel(), s_t.ravel())[0, 1]
    print(f"\ncontrol variates (call on its underlying, n=200): sd ratio {ratio:.3f}, "
          f"theory sqrt(1 - rho^2) = {np.sqrt(1 - rho**2):.3f}")
    assert ratio == pytest.approx(np.sqrt(1 - rho**2), rel=0.08)


def test_controls_that_do_not_vary_or_too_few_units_fall_back_to_the_plain_mean():
    rng = np.random.default_rng(1)
    pay, s_t = _draw(rng, 1, 30)
    r = controlled_mean(pay[0], s_t[0], np.array([S0]))  # 15 units per half < 20 per control
    assert not r.used and r.value[0] == pytest.approx(pay[0].mean())
    pay, s_t = _draw(rng, 1, 400)
    r = controlled_mean(pay[0], np.stack([s_t[0], np.ones(400)], axis=1), np.array([S0, 1.0]))
    assert r.used and r.n_controls == 1
    with pytest.raises(ValueError, match="finite"):
        controlled_mean(np.array([1.0, np.nan] * 50), np.ones(100), np.array([1.0]))
    with pytest.raises(ValueError, match="same units"):
        controlled_mean(np.ones(10), np.ones(9), np.array([1.0]))
