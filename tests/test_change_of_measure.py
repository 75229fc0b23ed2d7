"""Change of measure: textbook Girsanov facts, then the density weights of the full model.

References used below:
- Girsanov's theorem: Øksendal, *Stochastic Differential Equations*, ch. 8.6; Shreve,
  *Stochastic Calculus for Finance II*, ch. 5.2 (chapter numbers from memory). If
  ``dX = mu_t dt + dW^P`` and ``W^Q = W^P + int theta ds`` then
  ``dQ/dP = exp(-int theta dW^P - 1/2 int theta^2 ds)`` on ``[0, T]``.
- ``scipy.stats.norm.logpdf`` for the exact likelihood ratio of Gaussian transitions on a grid.
- Martingale and deflator identities of the change of measure (Girsanov's theorem) (``E_P[Z_t] = 1``,
  ``E_P[Z_t f] = E_Q[f]``, ``E_P[D_t X] = E_Q[X / B_t]``), and the real-world expected short
  rate of Hull-White with a constant price of risk, ``alpha(t) + sigma lambda_r B(t)``
  (``E_P[x_t] = int_0^t e^{-a(t-s)} sigma lambda_r ds``; Brigo and Mercurio, *Interest Rate
  Models*, 2nd ed., 2006, ch. 3.3).

Monte Carlo tolerances: 4 standard errors with fixed seeds; a weighted mean ``mean(w f)`` has
the standard error ``std(w f) / sqrt(n)``; when two independent sets are compared the standard
errors add in quadrature.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from oracles.hull_white_equity import HullWhiteEquityModel, HullWhitePricesOfRisk
from scipy.integrate import quad
from scipy.stats import norm

from pqflow.market.curve import LogDiscountCurve
from pqflow.measure.density import density_coefficients, log_density_increments
from pqflow.measure.prices_of_risk import expected_short_rate
from pqflow.models.base import StepLaw
from pqflow.models.hull_white import HullWhiteParams, b_factor
from pqflow.models.total_return import TotalReturnIndex
from pqflow.simulation.engine import simulate_batch
from pqflow.storage.names import bond_column, equity_column

__all__: list[str] = []

Z4 = 4.0  # tolerance in standard errors


def _mean_se(v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Column means and their standard errors, for ``v`` of shape ``(n_paths, ...)``."""
    return v.mean(axis=0), v.std(axis=0, ddof=1) / math.sqrt(v.shape[0])


# --------------------------------------------------------------------------------------------
# (a) Ornstein-Uhlenbeck reweighted into Brownian motion
# --------------------------------------------------------------------------------------------


def test_ou_reweighted_by_its_drift_removal_is_brownian_motion() -> None:
    # P: dX = -kappa X dt + dW^P, X_0 = x0. Q removes the drift: dX = dW^Q (theta = kappa X),
    # so under Q, X_T ~ N(x0, T) (Øksendal ch. 8.6; Shreve II ch. 5.2).
    kappa, horizon, x0 = 0.8, 1.0, 0.5
    n_paths, n_coarse, sub = 40_000, 10, 50
    rng = np.random.default_rng(31415)
    h = horizon / (n_coarse * sub)
    decay, sd_fine = math.exp(-kappa * h), math.sqrt(-math.expm1(-2 * kappa * h) / (2 * kappa))

    x = np.full(n_paths, x0)
    log_girsanov = np.zeros(n_paths)
    grid = [x.copy()]
    for j in range(n_coarse * sub):
        xi = rng.standard_normal(n_paths)
        # continuous-time Girsanov exponent int kappa X dW - 1/2 int kappa^2 X^2 dt on the fine
        # grid, with dW = sqrt(h) xi from the same normals that drive the exact OU step
        log_girsanov += kappa * x * math.sqrt(h) * xi - 0.5 * kappa**2 * x**2 * h
        x = x * decay + sd_fine * xi
        if (j + 1) % sub == 0:
            grid.append(x.copy())
    path = np.stack(grid, axis=1)  # (n_paths, n_coarse + 1): exact OU on the coarse grid

    # exact likelihood ratio on the coarse grid: Q step N(X_k, dt), P step
    # N(X_k e^{-kappa dt}, (1 - e^{-2 kappa dt}) / (2 kappa)) (scipy.stats.norm.logpdf)
    dt = horizon / n_coarse
    sd_p = math.sqrt(-math.expm1(-2 * kappa * dt) / (2 * kappa))
    log_exact = (
        norm.logpdf(path[:, 1:], loc=path[:, :-1], scale=math.sqrt(dt))
        - norm.logpdf(path[:, 1:], loc=path[:, :-1] * math.exp(-kappa * dt), scale=sd_p)
    ).sum(axis=1)

    x_end = path[:, -1]
    for log_w in (log_exact, log_girsanov):
        w = np.exp(log_w)
        m, se = _mean_se(w)
        assert abs(m - 1.0) < Z4 * se  # E_P[dQ/dP] = 1
        m, se = _mean_se(w * x_end)
        assert abs(m - x0) < Z4 * se  # E_Q[X_T] = x0 (0 when started at 0)
        m, se = _mean_se(w * (x_end - x0) ** 2)
        assert abs(m - horizon) < Z4 * se  # Var_Q[X_T] = T

    # Power: without the weights the OU moments are far from the Brownian ones.
    m, se = _mean_se(x_end)
    assert abs(m - x0) > 20.0 * se
    m, se = _mean_se((x_end - x0) ** 2)
    assert abs(m - horizon) > 20.0 * se


# --------------------------------------------------------------------------------------------
# (b) Geometric Brownian motion: growth rate s reweighted to r, with pqflow's density code
# --------------------------------------------------------------------------------------------


def _gbm_laws(n_steps: int, dt: float, r: float, s: float, vol: float) -> list[StepLaw]:
    """1-d exact law of ln S per step: Q drift (r - vol^2/2) dt, P mean shift (s - r) dt."""
    law = StepLaw(
        transition=np.array([[1.0]]),
        drift=np.array([(r - 0.5 * vol**2) * dt]),
        chol=np.array([[vol * math.sqrt(dt)]]),
        real_world_shift=np.array([(s - r) * dt]),
    )
    return [law] * n_steps


@pytest.mark.parametrize("n_steps", [1, 5, 20])
def test_gbm_growth_rate_change_with_pqflow_density(n_steps: int) -> None:
    s0, r, s, vol, horizon, n_paths = 100.0, 0.03, 0.08, 0.2, 5.0, 50_000
    dt = horizon / n_steps
    laws = _gbm_laws(n_steps, dt, r, s, vol)
    eta = np.stack([density_coefficients(law) for law in laws])  # (n_steps, 1)
    theta = (s - r) / vol
    z = np.random.default_rng(271 + n_steps).standard_normal((n_paths, n_steps, 1))
    w_p = math.sqrt(dt) * z[:, :, 0].sum(axis=1)  # W^P_T

    # real-world set: ln S_T = ln S_0 + (s - vol^2/2) T + vol W^P_T
    log_s = math.log(s0) + sum(law.drift[0] + law.real_world_shift[0] for law in laws)
    s_end = np.exp(log_s + vol * w_p)
    log_q = log_density_increments(z, eta, measure="real_world").sum(axis=1)
    # Shreve II ch. 5.2: dQ/dP = exp(-theta W^P_T - theta^2 T / 2), theta = (s - r) / vol
    assert np.allclose(log_q, -theta * w_p - 0.5 * theta**2 * horizon, rtol=0.0, atol=1e-12)
    q = np.exp(log_q)
    m, se = _mean_se(q * s_end)
    assert abs(m - s0 * math.exp(r * horizon)) < Z4 * se  # E_Q[S_T] = S_0 e^{rT}
    m, se = _mean_se(s_end)
    assert abs(m - s0 * math.exp(s * horizon)) < Z4 * se  # E_P[S_T] = S_0 e^{sT}
    assert abs(m - s0 * math.exp(r * horizon)) > 20.0 * se  # power: the weights matter

    # market-consistent set with the same normals read as Q-normals: ln S_T uses drift r
    s_end_q = np.exp(math.log(s0) + (r - 0.5 * vol**2) * horizon + vol * w_p)
    log_p = log_density_increments(z, eta, measure="market_consistent").sum(axis=1)
    # dP/dQ = exp(+theta W^Q_T - theta^2 T / 2) (the inverse density, same theorem)
    assert np.allclose(log_p, theta * w_p - 0.5 * theta**2 * horizon, rtol=0.0, atol=1e-12)
    m, se = _mean_se(np.exp(log_p) * s_end_q)
    assert abs(m - s0 * math.exp(s * horizon)) < Z4 * se  # E_P[S_T] = S_0 e^{sT}


# --------------------------------------------------------------------------------------------
# (c) The full Hull-White + equity model: both scenario sets and their density columns
# --------------------------------------------------------------------------------------------

A, SIGMA, LAMBDA_R, LAMBDA_S = 0.05, 0.01, 0.1, 0.2
HORIZON, N_PATHS = 30, 5_000
CHECK_TIMES = (1, 5, 10, 20, 30)


def _full_model() -> HullWhiteEquityModel:
    pillars = np.arange(1.0, 41.0)
    zeros = 0.03 - 0.012 * np.exp(-pillars / 4.0)  # invented upward-sloping curve
    return HullWhiteEquityModel(
        curve=LogDiscountCurve.from_zero_rates(pillars, zeros),
        rates=HullWhiteParams(mean_reversion=A, volatility=SIGMA),
        equity=TotalReturnIndex(
            kind="equity", name="eq", level=100.0, income_yield=0.0, volatility=0.18, correlation=-0.3
        ),
        prices_of_risk=HullWhitePricesOfRisk(rates=LAMBDA_R, equity=LAMBDA_S),
        bond_maturities=(10.0,),
    )


@pytest.fixture(scope="module")
def scenario_sets() -> tuple[HullWhiteEquityModel, np.ndarray, dict, dict]:
    model = _full_model()
    times = np.arange(0.0, HORIZON + 1.0)
    seeds = np.random.SeedSequence(20250331).spawn(2)
    real_world = simulate_batch(
        model, times, measure="real_world", n_paths=N_PATHS,
        rng=np.random.default_rng(seeds[0]), antithetic=False,
    )
    market = simulate_batch(
        model, times, measure="market_consistent", n_paths=N_PATHS,
        rng=np.random.default_rng(seeds[1]), antithetic=False,
    )
    return model, times, real_world, market


def test_density_weights_average_to_one(scenario_sets) -> None:
    # E_P[dQ/dP | F_t] = 1 and E_Q[dP/dQ | F_t] = 1 at every output time (Girsanov's theorem).
    _, _, real_world, market = scenario_sets
    for weights in (real_world["q_density"], market["p_density"]):
        assert np.all(weights[:, 0] == 1.0)
        m, se = _mean_se(weights[:, 1:])
        assert np.all(np.abs(m - 1.0) < Z4 * se)


@pytest.mark.parametrize("column", ["short_rate", bond_column(10.0), equity_column("eq")])
def test_reweighted_real_world_reproduces_market_consistent(scenario_sets, column: str) -> None:
    # E_P[q_density_t f_t] = E_Q[f_t] (Girsanov's theorem), two independent sets compared
    # within 4 combined standard errors.
    _, times, real_world, market = scenario_sets
    idx = [int(np.searchsorted(times, t)) for t in CHECK_TIMES]
    m_p, se_p = _mean_se(real_world["q_density"][:, idx] * real_world[column][:, idx])
    m_q, se_q = _mean_se(market[column][:, idx])
    assert np.all(np.abs(m_p - m_q) < Z4 * np.hypot(se_p, se_q))
    # Power: without the weights the real-world means are far from the market-consistent ones.
    m_u, se_u = _mean_se(real_world[column][:, idx[-1]])
    assert abs(m_u - m_q[-1]) > 10.0 * math.hypot(se_u, se_q[-1])


def test_reweighted_market_consistent_gives_real_world_short_rate(scenario_sets) -> None:
    model, times, real_world, market = scenario_sets
    t = times[1:]
    # independent closed form: E_P[r_t] = f(0,t) + sigma^2 B(t)^2/2 + int_0^t e^{-a(t-s)}
    # sigma lambda_r ds (Brigo and Mercurio 2006, ch. 3.3, with the Girsanov drift)
    drift_part = np.array(
        [quad(lambda s, tt=tt: SIGMA * LAMBDA_R * math.exp(-A * (tt - s)), 0.0, tt)[0] for tt in t]
    )
    independent = model.curve.forward(t) + 0.5 * SIGMA**2 * b_factor(A, t) ** 2 + drift_part
    closed = expected_short_rate(
        model.curve, model.rates, model.prices_of_risk, t, measure="real_world"
    )
    assert np.allclose(closed, independent, rtol=1e-10, atol=1e-14)

    m, se = _mean_se(market["p_density"][:, 1:] * market["short_rate"][:, 1:])
    assert np.all(np.abs(m - closed) < Z4 * se)  # E_Q[p_density r_t] = E_P[r_t]
    m, se = _mean_se(real_world["short_rate"][:, 1:])
    assert np.all(np.abs(m - closed) < Z4 * se)  # the real-world set itself
    q_closed = expected_short_rate(
        model.curve, model.rates, model.prices_of_risk, t, measure="market_consistent"
    )
    m, se = _mean_se(market["short_rate"][:, 1:])
    assert np.all(np.abs(m - q_closed) < Z4 * se)  # E_Q[r_t] = alpha(t)
    # Power: at 30 years the two measures' expected short rates differ by many standard errors.
    assert abs(closed[-1] - q_closed[-1]) > 10.0 * se[-1]


def test_real_world_deflators_price_bonds_and_equity(scenario_sets) -> None:
    # Deflator D_t = Z_t / B_t: E_P[D_t] = P(0,t) and E_P[D_t S_t] = S_0 (Girsanov's theorem, the
    # state-price deflator; a total-return index over the bank account is a Q-martingale).
    model, times, real_world, _ = scenario_sets
    deflator = real_world["deflator"][:, 1:]
    m, se = _mean_se(deflator)
    assert np.all(np.abs(m - model.curve.discount(times[1:])) < Z4 * se)
    m, se = _mean_se(deflator * real_world[equity_column("eq")][:, 1:])
    assert np.all(np.abs(m - model.equity.level) < Z4 * se)
