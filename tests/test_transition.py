"""The exact joint transition of ``HullWhiteEquityModel`` against an independent derivation.

The reference moments are derived here from the stochastic integrals, not copied from the
model. Over a step ``[t0, t1]`` of length ``D``, with ``u = t1 - s``:

    x_1 - e^{-aD} x_0            = sigma   int e^{-a u} dW_s                       (e1)
    I_1 - I_0 - B(D) x_0         = sigma   int B(u) dW_s,  B(u) = int_0^u e^{-a v} dv (e2)
    L_1 - L_0 - int r ds + ...   = sigma_S int dZ_s,       dZ dW = rho ds          (e3)

so every covariance is a ``scipy.integrate.quad`` of a product of kernels (Ito isometry), and
the means follow from ``E[x_s | x_0] = x_0 e^{-a(s - t0)}`` and ``r = x + alpha``,
``alpha(s) = f(0,s) + sigma^2 B(s)^2 / 2`` (Brigo and Mercurio, *Interest Rate Models - Theory
and Practice*, 2nd ed., 2006, ch. 3.3). The log index moves by ``int r ds - sigma_S^2 D/2 +
sigma_S dZ`` (Black-Scholes dynamics of a total-return index). Under the real-world measure the
drivers gain drifts ``lambda_r``, ``lambda_S`` (Girsanov), whose effect on each noise is the
kernel integrated against the constant price of risk.

The curve is Nelson-Siegel (an analytic forward ``f(0,t)``) sampled at monthly pillars; every
step starts and ends on a pillar, where pqflow's interpolated ``ln P(0,t)`` equals the analytic
one, so the exact reference can integrate the analytic forward with quad.

Monte Carlo checks use fixed seeds; means within 4 standard errors, covariances within 4
standard errors of a Gaussian sample covariance, ``sqrt((S_ii S_jj + S_ij^2) / n)`` (common
practice; Anderson, *An Introduction to Multivariate Statistical Analysis*, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import assert_gaussian_moments
from oracles.hull_white_equity import HullWhiteEquityModel, HullWhitePricesOfRisk
from scipy.integrate import quad

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.total_return import TotalReturnIndex
from pqflow.simulation.engine import simulate_batch
from pqflow.storage.names import equity_column

__all__: list[str] = []

A, SIGMA = 0.08, 0.012
SIGMA_S, RHO = 0.18, -0.35
LAMBDA_R, LAMBDA_S = 0.15, 0.25
S0 = 120.0
NS = (0.035, -0.015, 0.02, 2.5)  # Nelson-Siegel beta0, beta1, beta2, tau (invented)


def _ns_forward(t: float) -> float:
    b0, b1, b2, tau = NS
    return b0 + b1 * math.exp(-t / tau) + b2 * (t / tau) * math.exp(-t / tau)


def _ns_log_discount(t: np.ndarray) -> np.ndarray:
    """-ln P(0,t) = int_0^t f: the closed-form integral of the Nelson-Siegel forward."""
    b0, b1, b2, tau = NS
    e = np.exp(-t / tau)
    return b0 * t + (b1 + b2) * tau * (1.0 - e) - b2 * t * e


def _model(rho: float = RHO) -> HullWhiteEquityModel:
    pillars = np.arange(1, 40 * 12 + 1) / 12.0
    curve = LogDiscountCurve(
        maturities=pillars, discount_factors=np.exp(-_ns_log_discount(pillars))
    )
    return HullWhiteEquityModel(
        curve=curve,
        rates=HullWhiteParams(mean_reversion=A, volatility=SIGMA),
        equity=TotalReturnIndex(
            kind="equity", name="eq", level=S0, income_yield=0.0, volatility=SIGMA_S, correlation=rho
        ),
        prices_of_risk=HullWhitePricesOfRisk(rates=LAMBDA_R, equity=LAMBDA_S),
        bond_maturities=(),
    )


def _q(fn, lo: float, hi: float) -> float:
    return quad(fn, lo, hi, epsabs=0.0, epsrel=1e-13, limit=200)[0]


def _b(u: float) -> float:
    return -math.expm1(-A * u) / A


def _exact_cov(dt: float, rho: float = RHO) -> np.ndarray:
    """Covariance of the noise of (x, I, L) over a step of length dt, by quad (Ito isometry)."""
    k1 = lambda u: SIGMA * math.exp(-A * u)  # noqa: E731  kernel of e1 on dW
    k2 = lambda u: SIGMA * _b(u)  # noqa: E731  kernel of e2 on dW
    v11 = _q(lambda u: k1(u) ** 2, 0.0, dt)
    v12 = _q(lambda u: k1(u) * k2(u), 0.0, dt)
    v22 = _q(lambda u: k2(u) ** 2, 0.0, dt)
    c13 = rho * SIGMA_S * _q(k1, 0.0, dt)  # Cov(e1, e3): E[dW dZ] = rho du
    c23 = rho * SIGMA_S * _q(k2, 0.0, dt)
    v33 = SIGMA_S**2 * dt
    # noise of L is e2 + e3 (the integral of x enters the log index one for one)
    return np.array(
        [[v11, v12, v12 + c13], [v12, v22, v22 + c23], [v12 + c13, v22 + c23, v22 + 2 * c23 + v33]]
    )


def _int_alpha(t0: float, t1: float) -> float:
    """int_{t0}^{t1} alpha(s) ds with alpha = f(0,s) + sigma^2 B(s)^2 / 2 (by quad)."""
    return _q(_ns_forward, t0, t1) + 0.5 * SIGMA**2 * _q(lambda s: _b(s) ** 2, t0, t1)


def _exact_mean(t0: float, t1: float, state: np.ndarray, *, real_world: bool) -> np.ndarray:
    """E[(x, I, L)(t1) | state at t0] under Q (or P with the price-of-risk drifts)."""
    x0, i0, l0 = state
    dt = t1 - t0
    ex = x0 * math.exp(-A * dt)
    ei = i0 + _q(lambda s: x0 * math.exp(-A * (s - t0)), t0, t1)
    el = l0 + (ei - i0) + _int_alpha(t0, t1) - 0.5 * SIGMA_S**2 * dt
    mean = np.array([ex, ei, el])
    if real_world:
        # P drift of dx gains sigma*lambda_r, of d ln S gains sigma_S*lambda_S (Girsanov).
        shift_x = SIGMA * LAMBDA_R * _q(lambda u: math.exp(-A * u), 0.0, dt)
        shift_i = SIGMA * LAMBDA_R * _q(_b, 0.0, dt)
        mean = mean + np.array([shift_x, shift_i, shift_i + SIGMA_S * LAMBDA_S * dt])
    return mean


# --------------------------------------------------------------------------------------------
# Exact (deterministic) checks of the step law
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("dt", [1.0 / 12.0, 1.0, 5.0])
@pytest.mark.parametrize("rho", [RHO, 0.5])
def test_step_covariance_matches_quad(dt: float, rho: float) -> None:
    got = _model(rho).step_covariance(0.0, dt)
    assert np.allclose(got, _exact_cov(dt, rho), rtol=1e-10, atol=0.0)  # Ito isometry + quad


@pytest.mark.parametrize(
    ("t0", "t1", "state"),
    [
        (0.0, 1.0, (0.0, 0.0, math.log(S0))),
        (0.0, 1.0 / 12.0, (0.0, 0.0, math.log(S0))),
        (5.0, 6.0, (0.012, 0.04, math.log(150.0))),
        (10.0, 10.0 + 1.0 / 12.0, (-0.02, -0.1, math.log(90.0))),
        (3.0, 13.0, (0.03, 0.02, math.log(200.0))),
    ],
)
def test_step_law_mean_from_any_state(t0: float, t1: float, state: tuple[float, ...]) -> None:
    s0 = np.array(state)
    law = _model().step_law(t0, t1)
    q_mean = law.transition @ s0 + law.drift
    p_mean = q_mean + law.real_world_shift
    assert np.allclose(q_mean, _exact_mean(t0, t1, s0, real_world=False), rtol=1e-11, atol=1e-13)
    assert np.allclose(p_mean, _exact_mean(t0, t1, s0, real_world=True), rtol=1e-11, atol=1e-13)
    cov = law.chol @ law.chol.T
    assert np.allclose(cov, _exact_cov(t1 - t0), rtol=1e-10, atol=0.0)
    assert np.allclose(law.chol, np.tril(law.chol))  # lower triangular, as StepLaw promises


# --------------------------------------------------------------------------------------------
# Monte Carlo checks of the engine plus the model
# --------------------------------------------------------------------------------------------


def _states_from_columns(model: HullWhiteEquityModel, times: np.ndarray, out: dict) -> np.ndarray:
    """Recover (x, I, L) at the last time from the published columns.

    x = r - alpha(t), I = ln(B_t P(0,t)) - V(t)/2 (Brigo and Mercurio 2006, ch. 3.3, the cash
    account in x), L = ln S, with V by quad. The instantaneous forward in alpha is the input
    curve's own ``f(0,t)`` (its PCHIP slope at the pillar differs from the analytic
    Nelson-Siegel forward by ~1e-5, which 200k paths would detect); the discount factor at a
    pillar is the analytic one.
    """
    t = float(times[-1])
    alpha_t = float(model.curve.forward(t)) + 0.5 * SIGMA**2 * _b(t) ** 2
    v_t = SIGMA**2 * _q(lambda s: _b(s) ** 2, 0.0, t)
    x = out["short_rate"][:, -1] - alpha_t
    integral = np.log(out["cash_account"][:, -1]) - _ns_log_discount(np.array(t)) - 0.5 * v_t
    log_s = np.log(out[equity_column(model.equity.name)][:, -1])
    return np.stack([x, integral, log_s], axis=1)


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
@pytest.mark.parametrize("dt", [1.0, 1.0 / 12.0])
def test_one_step_moments_by_simulation(measure: str, dt: float) -> None:
    model = _model()
    times = np.array([0.0, dt])
    out = simulate_batch(
        model, times, measure=measure, n_paths=200_000,
        rng=np.random.default_rng(7 + int(1 / dt)), antithetic=False,
    )
    sample = _states_from_columns(model, times, out)
    s0 = np.array([0.0, 0.0, math.log(S0)])
    mean = _exact_mean(0.0, dt, s0, real_world=measure == "real_world")
    assert_gaussian_moments(sample, mean, _exact_cov(dt))


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
def test_two_steps_compose_to_the_exact_law(measure: str) -> None:
    # Steps [0,5] and [5,6] must compose to the exact law over [0,6] from the initial state:
    # the Gaussian process is Markov in (x, I, L), so the two-step law is the one-interval law.
    model = _model()
    times = np.array([0.0, 5.0, 6.0])
    out = simulate_batch(
        model, times, measure=measure, n_paths=200_000, rng=np.random.default_rng(56),
        antithetic=False,
    )
    sample = _states_from_columns(model, times, out)
    s0 = np.array([0.0, 0.0, math.log(S0)])
    mean = _exact_mean(0.0, 6.0, s0, real_world=measure == "real_world")
    assert_gaussian_moments(sample, mean, _exact_cov(6.0))


def test_martingale_facts_under_q() -> None:
    # Under Q with the bank account as numeraire: E[1/B_t] = P(0,t) and E[S_t/B_t] = S_0 for a
    # total-return index (Brigo and Mercurio 2006, ch. 2; the "1 = 1" test, SOA ESG guide §8.3).
    model = _model()
    times = np.arange(0.0, 31.0)
    out = simulate_batch(
        model, times, measure="market_consistent", n_paths=20_000,
        rng=np.random.default_rng(2025), antithetic=False,
    )
    n = out["cash_account"].shape[0]
    inv_b = 1.0 / out["cash_account"][:, 1:]
    p0t = np.exp(-_ns_log_discount(times[1:]))
    assert np.all(np.abs(inv_b.mean(axis=0) - p0t) < 4.0 * inv_b.std(axis=0, ddof=1) / np.sqrt(n))
    disc_s = out[equity_column("eq")][:, 1:] * inv_b
    assert np.all(np.abs(disc_s.mean(axis=0) - S0) < 4.0 * disc_s.std(axis=0, ddof=1) / np.sqrt(n))
