"""The exact joint transition of ``G2PlusPlusEquityModel`` against an independent derivation.

The reference moments are derived here from the stochastic integrals, not copied from the
model. Over a step ``[t0, t1]`` each noise is a Wiener integral against the three correlated
drivers ``(W1, W2, Z)`` (correlation matrix ``C``) with a loading vector ``g(s)``:

    x:  (sigma e^{-a (t1-s)}, 0, 0)              y:  (0, eta e^{-b (t1-s)}, 0)
    I:  (sigma B_a(t1-s), eta B_b(t1-s), 0)      L:  (sigma B_a(t1-s), eta B_b(t1-s), sigma_S(s))

(``I = int (x + y)``, ``L = ln S``; ``d ln S = (r - sigma_S^2/2) dt + sigma_S dZ``), so every
covariance is ``int g_i(s)^T C g_j(s) ds`` by ``scipy.integrate.quad`` (Ito isometry), split at
the knots of the piecewise-constant schedules. Means: ``E[x_s | x_0] = x_0 e^{-a (s - t0)}``
(likewise ``y``), ``r = x + y + phi``, with ``phi(t) = f(0,t) + sigma^2 B_a^2/2 + eta^2 B_b^2/2 +
rho sigma eta B_a B_b`` (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd
ed., 2006, ch. 4.2, eq. 4.12, from memory). Under the real-world measure ``W^Q = W^P + int
lambda`` on each driver (Girsanov): ``dx`` gains ``sigma lambda_x``, ``dy`` gains ``eta
lambda_y``, ``d ln S`` gains ``sigma_S lambda_S``, and each mean moves by the kernel integrated
against those drifts.

The curve is Nelson-Siegel (analytic forward) sampled at monthly pillars; steps start and end on
pillars, where pqflow's interpolated ``ln P(0,t)`` equals the analytic one.

Monte Carlo checks use fixed seeds; means within 4 standard errors, covariances within 4
standard errors of a Gaussian sample covariance, ``sqrt((S_ii S_jj + S_ij^2) / n)`` (common
practice; Anderson, *An Introduction to Multivariate Statistical Analysis*, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import assert_gaussian_moments, mean_within_se
from oracles.g2pp_equity import (
    G2EquityParams,
    G2PlusPlusEquityModel,
    G2PricesOfRisk,
    equity_option_price,
    expected_short_rate,
    real_world_factor_means,
)
from scipy.integrate import quad

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.base import ScenarioModel
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.schedule import PiecewiseConstant
from pqflow.simulation.engine import simulate_batch

__all__: list[str] = []

A, SIGMA, B, ETA, RHO = 0.5, 0.01, 0.05, 0.008, -0.7
RHO_XS, RHO_YS = 0.25, -0.3
S0, Q_DIV = 120.0, 0.015
VOL_S = PiecewiseConstant(knots=(0.0, 2.5, 5.5), values=(0.2, 0.16, 0.18))
LAM_X = PiecewiseConstant(knots=(0.0, 3.0), values=(0.2, -0.1))
LAM_Y = PiecewiseConstant(knots=(0.0, 1.5), values=(0.1, 0.25))
LAM_S = 0.3
KNOTS = (1.5, 2.5, 3.0, 5.5)
NS = (0.035, -0.015, 0.02, 2.5)  # Nelson-Siegel beta0, beta1, beta2, tau (invented)
CORR = np.array([[1.0, RHO, RHO_XS], [RHO, 1.0, RHO_YS], [RHO_XS, RHO_YS, 1.0]])


def _ns_forward(t: float) -> float:
    b0, b1, b2, tau = NS
    return b0 + b1 * math.exp(-t / tau) + b2 * (t / tau) * math.exp(-t / tau)


def _ns_log_discount(t):
    """-ln P(0,t) = int_0^t f: the closed-form integral of the Nelson-Siegel forward."""
    b0, b1, b2, tau = NS
    e = np.exp(-np.asarray(t) / tau)
    return b0 * t + (b1 + b2) * tau * (1.0 - e) - b2 * t * e


def _model(bond_maturities=(1.0, 10.0)) -> G2PlusPlusEquityModel:
    pillars = np.arange(1, 45 * 12 + 1) / 12.0
    curve = LogDiscountCurve(maturities=pillars, discount_factors=np.exp(-_ns_log_discount(pillars)))
    return G2PlusPlusEquityModel(
        curve=curve,
        rates=G2PlusPlusParams(a=A, sigma=SIGMA, b=B, eta=ETA, rho=RHO),
        equity=G2EquityParams(name="eq", level=S0, dividend_yield=Q_DIV, volatility=VOL_S,
                              correlation_x=RHO_XS, correlation_y=RHO_YS),
        prices_of_risk=G2PricesOfRisk(x=LAM_X, y=LAM_Y, equity=LAM_S),
        bond_maturities=bond_maturities,
    )


def _q(fn, lo: float, hi: float) -> float:
    """quad split at the schedules' knots."""
    cuts = [lo, *[k for k in KNOTS if lo < k < hi], hi]
    return sum(quad(fn, u0, u1, epsabs=0.0, epsrel=1e-13, limit=200)[0] for u0, u1 in zip(cuts, cuts[1:], strict=False))


def _ba(u: float) -> float:
    return -math.expm1(-A * u) / A


def _bb(u: float) -> float:
    return -math.expm1(-B * u) / B


def _loadings(t1: float, s: float) -> np.ndarray:
    """Rows: loading vectors of the noises of (x, y, I, L) on (W1, W2, Z) at time s."""
    u = t1 - s
    vol = float(VOL_S(s))
    return np.array([
        [SIGMA * math.exp(-A * u), 0.0, 0.0],
        [0.0, ETA * math.exp(-B * u), 0.0],
        [SIGMA * _ba(u), ETA * _bb(u), 0.0],
        [SIGMA * _ba(u), ETA * _bb(u), vol],
    ])


def _exact_cov(t0: float, t1: float) -> np.ndarray:
    cov = np.empty((4, 4))
    for i in range(4):
        for j in range(i, 4):
            cov[i, j] = cov[j, i] = _q(lambda s, i=i, j=j: _loadings(t1, s)[i] @ CORR @ _loadings(t1, s)[j], t0, t1)
    return cov


def _v(t: float) -> float:
    """V(t) = Var int_0^t (x + y), by quad (Ito isometry)."""
    return _q(lambda s: SIGMA**2 * _ba(s) ** 2 + ETA**2 * _bb(s) ** 2 + 2 * RHO * SIGMA * ETA * _ba(s) * _bb(s), 0.0, t)


def _phi_convexity(s: float) -> float:
    return 0.5 * SIGMA**2 * _ba(s) ** 2 + 0.5 * ETA**2 * _bb(s) ** 2 + RHO * SIGMA * ETA * _ba(s) * _bb(s)


def _exact_mean(t0: float, t1: float, state, *, real_world: bool) -> np.ndarray:
    x0, y0, i0, l0 = state
    dt = t1 - t0
    ex, ey = x0 * math.exp(-A * dt), y0 * math.exp(-B * dt)
    ei = i0 + _q(lambda s: x0 * math.exp(-A * (s - t0)) + y0 * math.exp(-B * (s - t0)), t0, t1)
    int_phi = _q(_ns_forward, t0, t1) + _q(_phi_convexity, t0, t1)
    el = l0 + (ei - i0) + int_phi - 0.5 * _q(lambda s: float(VOL_S(s)) ** 2, t0, t1)
    mean = np.array([ex, ey, ei, el])
    if real_world:
        lx = lambda s: float(LAM_X(s))  # noqa: E731
        ly = lambda s: float(LAM_Y(s))  # noqa: E731
        mx = _q(lambda s: SIGMA * lx(s) * math.exp(-A * (t1 - s)), t0, t1)
        my = _q(lambda s: ETA * ly(s) * math.exp(-B * (t1 - s)), t0, t1)
        mi = _q(lambda s: SIGMA * lx(s) * _ba(t1 - s) + ETA * ly(s) * _bb(t1 - s), t0, t1)
        ms = _q(lambda s: float(VOL_S(s)) * LAM_S, t0, t1)
        mean = mean + np.array([mx, my, mi, mi + ms])
    return mean


# --------------------------------------------------------------------------------------------
# Exact (deterministic) checks of the step law
# --------------------------------------------------------------------------------------------


def test_model_satisfies_the_protocol():
    model = _model()
    assert isinstance(model, ScenarioModel)
    assert model.state_names == ("x", "y", "integral_xy", "log_equity")
    assert set(model.column_units()) == {"short_rate", "cash_account", "zcb_1y", "zcb_10y", "equity_eq"}


@pytest.mark.parametrize(
    ("t0", "t1", "state"),
    [
        (0.0, 1.0, (0.0, 0.0, 0.0, math.log(S0))),
        (0.0, 1.0 / 12.0, (0.0, 0.0, 0.0, math.log(S0))),
        (2.0, 3.5, (0.012, -0.004, 0.04, math.log(150.0))),  # crosses knots 2.5 and 3.0
        (10.0, 10.0 + 1.0 / 12.0, (-0.02, 0.01, -0.1, math.log(90.0))),
        (1.0, 11.0, (0.03, -0.02, 0.02, math.log(200.0))),  # crosses every knot
    ],
)
def test_step_law_mean_and_covariance(t0, t1, state):
    s0 = np.array(state)
    law = _model().step_law(t0, t1)
    q_mean = law.transition @ s0 + law.drift
    p_mean = q_mean + law.real_world_shift
    assert np.allclose(q_mean, _exact_mean(t0, t1, s0, real_world=False), rtol=1e-11, atol=1e-13)
    assert np.allclose(p_mean, _exact_mean(t0, t1, s0, real_world=True), rtol=1e-11, atol=1e-13)
    cov = law.chol @ law.chol.T
    assert np.allclose(cov, _exact_cov(t0, t1), rtol=1e-10, atol=1e-18)  # Ito isometry + quad
    assert np.allclose(law.chol, np.tril(law.chol))  # lower triangular, as StepLaw promises


def test_real_world_factor_means_and_short_rate():
    # E_P[x_t] = sigma int_0^t lambda_x(s) e^{-a(t-s)} ds (the mean ODE of the shifted OU), by
    # quad; E_Q[r_t] = phi(t) with the curve's own forward.
    model = _model()
    t = np.array([0.5, 2.0, 4.0, 12.0])
    mx, my = real_world_factor_means(model.rates, model.prices_of_risk, t)
    ref_x = [_q(lambda s, ti=ti: SIGMA * float(LAM_X(s)) * math.exp(-A * (ti - s)), 0.0, ti) for ti in t]
    ref_y = [_q(lambda s, ti=ti: ETA * float(LAM_Y(s)) * math.exp(-B * (ti - s)), 0.0, ti) for ti in t]
    assert np.allclose(mx, ref_x, rtol=1e-11) and np.allclose(my, ref_y, rtol=1e-11)
    q_rate = expected_short_rate(model.curve, model.rates, model.prices_of_risk, t, measure="market_consistent")
    ref_q = [float(model.curve.forward(ti)) + _phi_convexity(ti) for ti in t]
    assert np.allclose(q_rate, ref_q, rtol=1e-12)
    p_rate = expected_short_rate(model.curve, model.rates, model.prices_of_risk, t, measure="real_world")
    assert np.allclose(p_rate, np.array(ref_q) + ref_x + ref_y, rtol=1e-12)


# --------------------------------------------------------------------------------------------
# Monte Carlo checks of the engine plus the model
# --------------------------------------------------------------------------------------------


def _states_from_columns(model: G2PlusPlusEquityModel, t: float, out: dict, k: int = -1) -> np.ndarray:
    """Recover (x, y, I, L) at grid index ``k`` (time ``t``) from the published columns.

    Two bonds give two linear equations in (x, y): ``-ln P(t,t+m) + ln A(t,m) = B_a(m) x +
    B_b(m) y`` with ``ln A(t,m) = ln P(0,t+m)/P(0,t) + (V(m) - V(t+m) + V(t))/2`` (Brigo and
    Mercurio 2006, eq. 4.14, from memory), V by quad and P(0, .) analytic at pillars;
    ``I = ln(B_t P(0,t)) - V(t)/2`` (the cash account in the factors); ``L = ln S``."""
    rows, rhs = [], []
    for m in (1.0, 10.0):
        log_a = _ns_log_discount(t) - _ns_log_discount(t + m) + 0.5 * (_v(m) - _v(t + m) + _v(t))
        rows.append([_ba(m), _bb(m)])
        rhs.append(log_a - np.log(out[f"zcb_{m:g}y"][:, k]))
    xy = np.linalg.solve(np.array(rows), np.array(rhs))
    integral = np.log(out["cash_account"][:, k]) - _ns_log_discount(t) - 0.5 * _v(t)
    return np.stack([xy[0], xy[1], integral, np.log(out["equity_eq"][:, k])], axis=1)


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
@pytest.mark.parametrize("times", [(0.0, 1.0), (0.0, 5.0, 6.0)], ids=["one-step", "two-steps"])
def test_moments_by_simulation(measure, times):
    # One step, and two steps [0,5], [5,6] composing to the exact one-interval law over [0,6]
    # (the Gaussian process is Markov in (x, y, I, L)); the steps cross the schedules' knots.
    model = _model()
    grid = np.array(times)
    out = simulate_batch(model, grid, measure=measure, n_paths=100_000,
                         rng=np.random.default_rng(11 + len(times)), antithetic=False)
    sample = _states_from_columns(model, float(grid[-1]), out)
    s0 = np.array([0.0, 0.0, 0.0, math.log(S0)])
    mean = _exact_mean(0.0, float(grid[-1]), s0, real_world=measure == "real_world")
    assert_gaussian_moments(sample, mean, _exact_cov(0.0, float(grid[-1])))


def test_martingale_facts_under_q():
    # Under Q with the bank account as numeraire: E[1/B_t] = P(0,t), E[S_t/B_t] = S_0 for a
    # total-return index, E[P(t,t+m)/B_t] = P(0,t+m) (Brigo and Mercurio 2006, ch. 2; the
    # "1 = 1" test, SOA ESG guide 2016 §8.3), and E[r_t] = phi(t) (the factors have mean 0).
    model = _model()
    times = np.arange(0.0, 21.0)
    out = simulate_batch(model, times, measure="market_consistent", n_paths=20_000,
                         rng=np.random.default_rng(2025), antithetic=False)
    t = times[1:]
    inv_b = 1.0 / out["cash_account"][:, 1:]
    assert mean_within_se(inv_b, np.exp(-_ns_log_discount(t)))
    assert mean_within_se(out["equity_eq"][:, 1:] * inv_b, np.full(t.size, S0))
    for m in (1.0, 10.0):
        assert mean_within_se(out[f"zcb_{m:g}y"][:, 1:] * inv_b, np.exp(-_ns_log_discount(t + m)))
    phi_t = np.array([float(model.curve.forward(ti)) + _phi_convexity(ti) for ti in t])
    assert mean_within_se(out["short_rate"][:, 1:], phi_t)


def test_real_world_set_reweighted_by_q_density_gives_q_expectations():
    # Change of measure (Girsanov's theorem): E_P[(dQ/dP) X] = E_Q[X] for X = 1, 1/B_t, S_t/B_t,
    # P(t,t+10)/B_t and r_t (whose Q means are the martingale facts above); the real-world set
    # itself drifts away (the prices of risk are not zero), so the reweighting does work.
    model = _model()
    times = np.arange(0.0, 11.0)
    out = simulate_batch(model, times, measure="real_world", n_paths=40_000,
                         rng=np.random.default_rng(77), antithetic=False)
    t = times[1:]
    w = out["q_density"][:, 1:]
    inv_b = 1.0 / out["cash_account"][:, 1:]
    disc_s = out["equity_eq"][:, 1:] * inv_b
    assert mean_within_se(w, np.ones(t.size))
    assert mean_within_se(w * inv_b, np.exp(-_ns_log_discount(t)))
    assert mean_within_se(w * disc_s, np.full(t.size, S0))
    assert mean_within_se(w * out["zcb_10y"][:, 1:] * inv_b, np.exp(-_ns_log_discount(t + 10.0)))
    phi_t = np.array([float(model.curve.forward(ti)) + _phi_convexity(ti) for ti in t])
    assert mean_within_se(w * out["short_rate"][:, 1:], phi_t)
    # the real-world set itself: expected short rate with the factor means, and an equity
    # drift that a martingale test would reject.
    p_rate = phi_t + np.array([_q(lambda s, ti=ti: SIGMA * float(LAM_X(s)) * math.exp(-A * (ti - s)), 0.0, ti)
                               + _q(lambda s, ti=ti: ETA * float(LAM_Y(s)) * math.exp(-B * (ti - s)), 0.0, ti)
                               for ti in t])
    assert mean_within_se(out["short_rate"][:, 1:], p_rate)
    assert not mean_within_se(disc_s[:, -1:], np.array([S0]), n_se=10.0)


def test_equity_option_closed_form_against_simulation():
    # Reference: the Monte Carlo price E_Q[(S_T e^{-qT} - K)^+ / B_T] of the simulated set, on
    # the price index S_T e^{-qT} (the simulated index reinvests dividends), within 4 standard
    # errors of the closed form (Black's formula with the G2++ total variance).
    model = _model()
    times = np.array([0.0, 4.0, 10.0])
    out = simulate_batch(model, times, measure="market_consistent", n_paths=100_000,
                         rng=np.random.default_rng(5), antithetic=True)
    price_index = out["equity_eq"][:, -1] * math.exp(-Q_DIV * 10.0)
    for strike, kind in [(120.0, "call"), (100.0, "put"), (160.0, "call")]:
        payoff = np.maximum(price_index - strike, 0.0) if kind == "call" else np.maximum(strike - price_index, 0.0)
        disc = payoff / out["cash_account"][:, -1]
        pairs = 0.5 * (disc[0::2] + disc[1::2])  # antithetic: standard error on pair averages
        closed = equity_option_price(model.curve, model.rates, model.equity, expiry=10.0, strike=strike, kind=kind)
        assert abs(pairs.mean() - closed) < 4.0 * pairs.std(ddof=1) / math.sqrt(pairs.size)
