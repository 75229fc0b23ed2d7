"""The Jarrow-Yildirim model against independent derivations, Monte Carlo and QuantLib.

Reference dynamics (Jarrow and Yildirim, *J. Financial and Quantitative Analysis* 38, 2003;
Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 15.1, from
memory), under the nominal risk-neutral measure Q with drivers ``(W_n, W_r, W_I)`` of correlation
``C``:

    dx = -a_n x dt + sigma_n dW_n,   dy = (-a_r y - rho_rI sigma_I sigma_r) dt + sigma_r dW_r,
    d ln I = (n - r - sigma_I^2 / 2) dt + sigma_I dW_I,   n = x + alpha_n,  r = y + alpha_r,

``alpha_k(s) = f_k(0,s) + sigma_k^2 B_k(s)^2 / 2`` (Hull-White fitted to each curve; Brigo and
Mercurio 2006, ch. 3.3). The reference moments are derived here from the stochastic integrals:
each noise of ``(x, y, X = int x, L = ln I)`` over ``[t0, t1]`` is a Wiener integral with a loading
vector on the three drivers,

    x: (sigma_n e^{-a_n u}, 0, 0),  y: (0, sigma_r e^{-a_r u}, 0),  X: (sigma_n B_n(u), 0, 0),
    L: (sigma_n B_n(u), -sigma_r B_r(u), sigma_I),    u = t1 - s,

so every covariance is ``int g_i^T C g_j ds`` by ``scipy.integrate.quad`` (Ito isometry) and the
means integrate the conditional means ``E[x_s]``, ``E[y_s]`` (the latter solving the mean ODE by
quad). Under the real-world measure ``W^Q = W^P + int lambda`` on each driver (Girsanov).

The curves are Nelson-Siegel (analytic forwards) sampled at monthly pillars; steps start and
end on pillars, where pqflow's interpolated ``ln P(0,t)`` equals the analytic one.

Monte Carlo checks use fixed seeds and a tolerance of 4 standard errors; covariances within 4
standard errors of a Gaussian sample covariance, ``sqrt((S_ii S_jj + S_ij^2) / n)`` (common
practice; Anderson, *An Introduction to Multivariate Statistical Analysis*, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql
from conftest import assert_gaussian_moments, mean_within_se
from oracles.jarrow_yildirim import InflationPricesOfRisk, JarrowYildirimModel
from scipy.integrate import quad

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.base import ScenarioModel
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.jarrow_yildirim import (
    JarrowYildirimParams,
    yoy_cap_price,
    yoy_caplet_price,
    yoy_convexity,
    yoy_forward,
    yoy_log_variance,
    yoy_swap_rate,
    zciis_rate,
)
from pqflow.models.schedule import PiecewiseConstant
from pqflow.simulation.engine import simulate_batch

__all__: list[str] = []

A_N, S_N = 0.08, 0.011
A_R, S_R = 0.25, 0.007
S_I = 0.012
R_NR, R_NI, R_RI = 0.55, 0.15, -0.3
CORR = np.array([[1.0, R_NR, R_NI], [R_NR, 1.0, R_RI], [R_NI, R_RI, 1.0]])
LAM_N = PiecewiseConstant(knots=(0.0, 3.0), values=(0.2, -0.1))
LAM_R = PiecewiseConstant(knots=(0.0, 1.5), values=(0.15, 0.3))
LAM_I = PiecewiseConstant(knots=(0.0, 2.5), values=(0.25, -0.2))
KNOTS = (1.5, 2.5, 3.0)
CPI0 = 100.0
NS_N = (0.035, -0.015, 0.02, 2.5)  # Nelson-Siegel beta0, beta1, beta2, tau (invented)
NS_R = (0.012, -0.02, 0.01, 1.5)  # a real curve below the nominal one (invented)


def _ns_forward(ns, t: float) -> float:
    b0, b1, b2, tau = ns
    return b0 + b1 * math.exp(-t / tau) + b2 * (t / tau) * math.exp(-t / tau)


def _ns_log_discount(ns, t):
    """-ln P(0,t) = int_0^t f: the closed-form integral of the Nelson-Siegel forward."""
    b0, b1, b2, tau = ns
    t = np.asarray(t, dtype=float)
    e = np.exp(-t / tau)
    return b0 * t + (b1 + b2) * tau * (1.0 - e) - b2 * t * e


def _pn(t):
    return np.exp(-_ns_log_discount(NS_N, t))


def _pr(t):
    return np.exp(-_ns_log_discount(NS_R, t))


PARAMS = JarrowYildirimParams(
    nominal=HullWhiteParams(mean_reversion=A_N, volatility=S_N),
    real=HullWhiteParams(mean_reversion=A_R, volatility=S_R),
    inflation_volatility=S_I,
    correlation_nominal_real=R_NR,
    correlation_nominal_inflation=R_NI,
    correlation_real_inflation=R_RI,
)


def _model(params: JarrowYildirimParams = PARAMS) -> JarrowYildirimModel:
    pillars = np.arange(1, 40 * 12 + 1) / 12.0
    return JarrowYildirimModel(
        nominal_curve=LogDiscountCurve(maturities=pillars, discount_factors=_pn(pillars)),
        real_curve=LogDiscountCurve(maturities=pillars, discount_factors=_pr(pillars)),
        params=params,
        prices_of_risk=InflationPricesOfRisk(nominal=LAM_N, real=LAM_R, inflation=LAM_I),
        bond_maturities=(10.0,),
        real_bond_maturities=(5.0, 10.0),
        cpi_base=CPI0,
    )


def _q(fn, lo: float, hi: float) -> float:
    """quad split at the schedules' knots."""
    cuts = [lo, *[k for k in KNOTS if lo < k < hi], hi]
    return sum(quad(fn, u0, u1, epsabs=1e-15, epsrel=1e-12, limit=200)[0] for u0, u1 in zip(cuts, cuts[1:],
                                                                                            strict=False))


def _bn(u: float) -> float:
    return -math.expm1(-A_N * u) / A_N


def _br(u: float) -> float:
    return -math.expm1(-A_R * u) / A_R


def _loadings(t1: float, s: float) -> np.ndarray:
    """Rows: loading vectors of the noises of (x, y, X, L) on (W_n, W_r, W_I) at time s."""
    u = t1 - s
    return np.array([
        [S_N * math.exp(-A_N * u), 0.0, 0.0],
        [0.0, S_R * math.exp(-A_R * u), 0.0],
        [S_N * _bn(u), 0.0, 0.0],
        [S_N * _bn(u), -S_R * _br(u), S_I],
    ])


def _exact_cov(t0: float, t1: float) -> np.ndarray:
    cov = np.empty((4, 4))
    for i in range(4):
        for j in range(i, 4):
            cov[i, j] = cov[j, i] = _q(lambda s, i=i, j=j: _loadings(t1, s)[i] @ CORR @ _loadings(t1, s)[j], t0, t1)
    return cov


def _v(a: float, s: float, t: float) -> float:
    """Hull-White V(t) = Var int_0^t x, by quad."""
    return quad(lambda u: (s * -math.expm1(-a * u) / a) ** 2, 0.0, t, epsabs=0.0, epsrel=1e-13)[0]


def _exact_mean(t0: float, t1: float, state, *, real_world: bool) -> np.ndarray:
    """E[(x, y, X, L)(t1) | state at t0] under Q, or under P with W^Q = W^P + int lambda."""
    x0, y0, i0, l0 = state
    dt = t1 - t0

    def lam(s: float) -> np.ndarray:
        if not real_world:
            return np.zeros(3)
        return np.array([float(LAM_N(s)), float(LAM_R(s)), float(LAM_I(s))])

    drift_x = lambda s: S_N * lam(s)[0]  # noqa: E731  P drift of dx: + sigma_n lambda_n
    drift_y = lambda s: -R_RI * S_I * S_R + S_R * lam(s)[1]  # noqa: E731  Q adjustment + P shift

    def mean_x(s: float) -> float:
        return x0 * math.exp(-A_N * (s - t0)) + _q(lambda v: drift_x(v) * math.exp(-A_N * (s - v)), t0, s)

    def mean_y(s: float) -> float:
        return y0 * math.exp(-A_R * (s - t0)) + _q(lambda v: drift_y(v) * math.exp(-A_R * (s - v)), t0, s)

    ex, ey = mean_x(t1), mean_y(t1)
    int_x = _q(mean_x, t0, t1)
    int_y = _q(mean_y, t0, t1)
    alpha_n = lambda s: _ns_forward(NS_N, s) + 0.5 * S_N**2 * _bn(s) ** 2  # noqa: E731
    alpha_r = lambda s: _ns_forward(NS_R, s) + 0.5 * S_R**2 * _br(s) ** 2  # noqa: E731
    el = l0 + int_x - int_y + _q(lambda s: alpha_n(s) - alpha_r(s), t0, t1) - 0.5 * S_I**2 * dt
    el += _q(lambda s: S_I * lam(s)[2], t0, t1)  # P drift of d ln I: + sigma_I lambda_I
    return np.array([ex, ey, i0 + int_x, el])


# --------------------------------------------------------------------------------------------
# Exact (deterministic) checks of the step law
# --------------------------------------------------------------------------------------------


def test_model_satisfies_the_protocol():
    model = _model()
    assert isinstance(model, ScenarioModel)
    assert model.state_names == ("x_nominal", "x_real", "integral_x_nominal", "log_cpi")
    assert set(model.column_units()) == {
        "short_rate", "cash_account", "zcb_10y", "cpi", "real_short_rate", "real_zcb_5y", "real_zcb_10y",
    }
    assert np.allclose(model.initial_state(), [0.0, 0.0, 0.0, math.log(CPI0)])
    with pytest.raises(ValueError, match="unknown output columns"):
        model.columns(np.array([0.0]), np.zeros((1, 1, 4)), names=("zcb_3y",))


def test_correlations_must_be_positive_definite():
    # (0.9, 0.9, -0.9) is not a correlation matrix: its smallest eigenvalue is negative
    # (numpy.linalg.eigvalsh gives -0.8), so the model must refuse it.
    with pytest.raises(ValueError, match="positive definite"):
        JarrowYildirimParams(
            nominal=PARAMS.nominal, real=PARAMS.real, inflation_volatility=S_I,
            correlation_nominal_real=0.9, correlation_nominal_inflation=0.9,
            correlation_real_inflation=-0.9,
        )


@pytest.mark.parametrize(
    ("t0", "t1", "state"),
    [
        (0.0, 1.0, (0.0, 0.0, 0.0, math.log(CPI0))),
        (0.0, 1.0 / 12.0, (0.0, 0.0, 0.0, math.log(CPI0))),
        (2.0, 3.5, (0.012, -0.004, 0.04, math.log(104.0))),  # crosses knots 2.5 and 3.0
        (10.0, 10.0 + 1.0 / 12.0, (-0.02, 0.01, -0.1, math.log(130.0))),
        (1.0, 11.0, (0.03, -0.02, 0.02, math.log(110.0))),  # crosses every knot
    ],
)
def test_step_law_mean_and_covariance(t0, t1, state):
    s0 = np.array(state)
    law = _model().step_law(t0, t1)
    q_mean = law.transition @ s0 + law.drift
    p_mean = q_mean + law.real_world_shift
    assert np.allclose(q_mean, _exact_mean(t0, t1, s0, real_world=False), rtol=1e-10, atol=1e-12)
    assert np.allclose(p_mean, _exact_mean(t0, t1, s0, real_world=True), rtol=1e-10, atol=1e-12)
    cov = law.chol @ law.chol.T
    assert np.allclose(cov, _exact_cov(t0, t1), rtol=1e-9, atol=1e-16)  # Ito isometry + quad
    assert np.allclose(law.chol, np.tril(law.chol))  # lower triangular, as StepLaw promises


# --------------------------------------------------------------------------------------------
# Monte Carlo checks of the engine plus the model
# --------------------------------------------------------------------------------------------


def _states_from_columns(model: JarrowYildirimModel, t: float, out: dict, k: int = -1) -> np.ndarray:
    """(x, y, X, L) at grid index k from the published columns: x = n - alpha_n(t),
    y = r - alpha_r(t) (alpha with each curve's own f(0,t), the PCHIP slope, which differs from
    the analytic forward by ~1e-5), X = ln(B_t P_n(0,t)) - V_n(t)/2 (Brigo and Mercurio 2006,
    ch. 3.3, the cash account in x), L = ln cpi."""
    x = out["short_rate"][:, k] - (float(model.nominal_curve.forward(t)) + 0.5 * S_N**2 * _bn(t) ** 2)
    y = out["real_short_rate"][:, k] - (float(model.real_curve.forward(t)) + 0.5 * S_R**2 * _br(t) ** 2)
    integral = np.log(out["cash_account"][:, k]) - _ns_log_discount(NS_N, t) - 0.5 * _v(A_N, S_N, t)
    return np.stack([x, y, integral, np.log(out["cpi"][:, k])], axis=1)


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
@pytest.mark.parametrize("times", [(0.0, 1.0), (0.0, 2.0, 4.0)], ids=["one-step", "two-steps"])
def test_moments_by_simulation(measure, times):
    # One step, and two steps [0,2], [2,4] composing to the exact one-interval law over [0,4]
    # (the Gaussian process is Markov in (x, y, X, L)); the steps cross the schedules' knots.
    model = _model()
    grid = np.array(times)
    out = simulate_batch(model, grid, measure=measure, n_paths=60_000,
                         rng=np.random.default_rng(31 + len(times)), antithetic=False)
    sample = _states_from_columns(model, float(grid[-1]), out)
    s0 = np.array([0.0, 0.0, 0.0, math.log(CPI0)])
    mean = _exact_mean(0.0, float(grid[-1]), s0, real_world=measure == "real_world")
    assert_gaussian_moments(sample, mean, _exact_cov(0.0, float(grid[-1])))


def test_martingale_facts_under_q():
    # Under Q with the nominal cash account as numeraire every traded asset in currency over B
    # is a martingale (Brigo and Mercurio 2006, ch. 2 and ch. 15.1; the "1 = 1" test, SOA ESG
    # guide 2016 §8.3): E[1/B_t] = P_n(0,t), E[P_n(t,t+m)/B_t] = P_n(0,t+m), the CPI as an
    # asset (the real cash account's value) E[I_t/B_t] = I_0 P_r(0,t), and the index-linked bond
    # E[I_t P_r(t,t+m)/B_t] = I_0 P_r(0,t+m).
    model = _model()
    times = np.arange(0.0, 21.0)
    out = simulate_batch(model, times, measure="market_consistent", n_paths=20_000,
                         rng=np.random.default_rng(2026), antithetic=False)
    t = times[1:]
    inv_b = 1.0 / out["cash_account"][:, 1:]
    cpi = out["cpi"][:, 1:]
    assert mean_within_se(inv_b, _pn(t))
    assert mean_within_se(out["zcb_10y"][:, 1:] * inv_b, _pn(t + 10.0))
    assert mean_within_se(cpi * inv_b, CPI0 * _pr(t))
    for m in (5.0, 10.0):
        assert mean_within_se(cpi * out[f"real_zcb_{m:g}y"][:, 1:] * inv_b, CPI0 * _pr(t + m))


def test_real_world_set_reweighted_by_q_density_gives_q_expectations():
    # Change of measure (Girsanov's theorem): E_P[(dQ/dP) X] = E_Q[X] for X = 1, 1/B_t, I_t/B_t and
    # I_t P_r(t,t+10)/B_t (whose Q means are the martingale facts above); the real-world set
    # itself drifts away (the prices of risk are not zero), so the reweighting does work.
    model = _model()
    times = np.arange(0.0, 11.0)
    out = simulate_batch(model, times, measure="real_world", n_paths=40_000,
                         rng=np.random.default_rng(78), antithetic=False)
    t = times[1:]
    w = out["q_density"][:, 1:]
    inv_b = 1.0 / out["cash_account"][:, 1:]
    disc_cpi = out["cpi"][:, 1:] * inv_b
    linker = disc_cpi * out["real_zcb_10y"][:, 1:]
    assert mean_within_se(w, np.ones(t.size))
    assert mean_within_se(w * inv_b, _pn(t))
    assert mean_within_se(w * disc_cpi, CPI0 * _pr(t))
    assert mean_within_se(w * linker, CPI0 * _pr(t + 10.0))
    assert not mean_within_se(disc_cpi[:, -1:], CPI0 * _pr(t[-1:]), n_se=10.0)


# --------------------------------------------------------------------------------------------
# Inflation derivatives
# --------------------------------------------------------------------------------------------


def _bm_convexity(s: float, e: float) -> float:
    """C(S, T) as printed by Brigo and Mercurio 2006, ch. 15.2 (from memory):
    sigma_r B_r(S,T) [B_r(0,S) (rho_rI sigma_I - sigma_r B_r(0,S)/2
    + rho_nr sigma_n/(a_n + a_r) (1 + a_r B_n(0,S))) - rho_nr sigma_n/(a_n + a_r) B_n(0,S)]."""
    brs, bns = _br(s), _bn(s)
    return S_R * _br(e - s) * (
        brs * (R_RI * S_I - 0.5 * S_R * brs + R_NR * S_N / (A_N + A_R) * (1.0 + A_R * bns))
        - R_NR * S_N / (A_N + A_R) * bns
    )


def _quad_log_variance(s: float, e: float) -> float:
    """Var ln(I_T/I_S) from the loadings: on [0, S] the factors x_S, y_S enter ln(I_T/I_S) with
    weights B_n(tau), -B_r(tau), so the loading there is (B_n(tau) sigma_n e^{-a_n(S-u)},
    -B_r(tau) sigma_r e^{-a_r(S-u)}, 0); on [S, T] it is the loading of L over that period
    (Ito isometry, by quad)."""
    tau = e - s
    g0 = lambda u: np.array([  # noqa: E731
        _bn(tau) * S_N * math.exp(-A_N * (s - u)), -_br(tau) * S_R * math.exp(-A_R * (s - u)), 0.0])
    g1 = lambda u: np.array([S_N * _bn(e - u), -S_R * _br(e - u), S_I])  # noqa: E731
    v = quad(lambda u: float(g1(u) @ CORR @ g1(u)), s, e, epsabs=0.0, epsrel=1e-13)[0]
    if s > 0.0:
        v += quad(lambda u: float(g0(u) @ CORR @ g0(u)), 0.0, s, epsabs=0.0, epsrel=1e-13)[0]
    return v


@pytest.mark.parametrize(("s", "e"), [(0.0, 1.0), (1.0, 2.0), (4.0, 5.0), (9.0, 10.0), (3.0, 3.5)])
def test_yoy_convexity_and_variance_closed_forms(s, e):
    got = yoy_convexity(PARAMS, start=s, end=e)
    assert math.isclose(got, _bm_convexity(s, e), rel_tol=1e-11, abs_tol=1e-16)
    assert math.isclose(yoy_log_variance(PARAMS, start=s, end=e), _quad_log_variance(s, e), rel_tol=1e-10)


def test_yoy_caplet_formula_is_unit_displaced_black():
    # QuantLib's blackFormula with displacement 1 on the YoY rate is Black on (1 + F, 1 + K),
    # what QuantLib's YoYInflationUnitDisplacedBlackCapFloorEngine::optionletImpl computes
    # (ql/pricingengines/inflation/inflationcapfloorengines.cpp; reference library).
    model = _model()
    for s, e, k in [(0.0, 1.0, 0.02), (4.0, 5.0, 0.0), (9.0, 10.0, 0.035)]:
        f = yoy_forward(model.nominal_curve, model.real_curve, PARAMS, start=s, end=e)
        sd = math.sqrt(yoy_log_variance(PARAMS, start=s, end=e))
        df = float(_pn(e))
        for kind, ql_type in (("cap", ql.Option.Call), ("floor", ql.Option.Put)):
            ref = (e - s) * ql.blackFormula(ql_type, k, f, sd, df, 1.0)
            got = yoy_caplet_price(model.nominal_curve, model.real_curve, PARAMS,
                                   start=s, end=e, strike=k, kind=kind)
            assert math.isclose(got, ref, rel_tol=1e-12, abs_tol=1e-16)


def _quantlib_yoy_caplet(*, start_year: int, forward: float, variance: float, discount: float,
                         strike: float, kind: str) -> float:
    """One YoY caplet through QuantLib's instrument and YoYInflationUnitDisplacedBlackCapFloorEngine.

    Market inputs are the JY ones: a flat YoY curve at the forward, a nominal curve through
    ``discount`` at the payment date, and a constant optionlet vol scaled so that the engine's
    total variance (vol^2 times QuantLib's own time from the surface's base date to the fixing
    date, which starts at the lagged month and carries leap days) equals ``variance``; the
    discount node sits on the payment date itself. Period [start_year, start_year + 1] from
    15 January 2025, Actual365Fixed (a 365-day accrual year for the periods used here)."""
    today = ql.Date(15, 1, 2025)
    ql.Settings.instance().evaluationDate = today
    dc, cal, lag = ql.Actual365Fixed(), ql.NullCalendar(), ql.Period(3, ql.Months)
    start, end = today + ql.Period(start_year, ql.Years), today + ql.Period(start_year + 1, ql.Years)
    assert dc.yearFraction(start, end) == 1.0  # the accrual; leap days only move other dates
    nominal = ql.YieldTermStructureHandle(ql.DiscountCurve([today, end], [1.0, discount], dc))
    nodes = [today - lag + ql.Period(i, ql.Years) for i in range(start_year + 3)]
    yoy = ql.YoYInflationTermStructureHandle(
        ql.YoYInflationCurve(nodes[0], nodes, [forward] * len(nodes), ql.Monthly, dc))
    index = ql.YYEUHICP(yoy)
    schedule = ql.Schedule(start, end, ql.Period(1, ql.Years), cal, ql.Unadjusted, ql.Unadjusted,
                           ql.DateGeneration.Forward, False)
    leg = ql.yoyInflationLeg(schedule, cal, index, lag, ql.CPI.Flat, [1.0], dc)
    fixing = ql.as_yoy_inflation_coupon(leg[0]).fixingDate()

    def surface(vol: float) -> ql.ConstantYoYOptionletVolatility:
        return ql.ConstantYoYOptionletVolatility(vol, 0, cal, ql.Unadjusted, dc, lag, ql.Monthly, False)

    unit_time = surface(1.0).totalVariance(fixing, strike, ql.Period(0, ql.Days))
    vol = ql.YoYOptionletVolatilitySurfaceHandle(surface(math.sqrt(variance / unit_time)))
    option = (ql.YoYInflationCap if kind == "cap" else ql.YoYInflationFloor)(leg, [strike])
    option.setPricingEngine(ql.YoYInflationUnitDisplacedBlackCapFloorEngine(index, vol, nominal))
    return option.NPV()


def test_yoy_caplet_against_quantlib_yoy_engine():
    # Reference library: QuantLib's YoY cap/floor instrument priced by its unit-displaced Black
    # engine (Black on 1 + F struck at 1 + K, as in Jarrow and Yildirim 2003), fed with the JY
    # forward, the JY variance and the nominal discount factor.
    model = _model()
    for s, k in [(4, 0.02), (9, 0.0), (1, 0.03)]:
        f = yoy_forward(model.nominal_curve, model.real_curve, PARAMS, start=float(s), end=float(s + 1))
        v = yoy_log_variance(PARAMS, start=float(s), end=float(s + 1))
        for kind in ("cap", "floor"):
            ref = _quantlib_yoy_caplet(start_year=s, forward=f, variance=v, discount=float(_pn(s + 1.0)),
                                       strike=k, kind=kind)
            got = yoy_caplet_price(model.nominal_curve, model.real_curve, PARAMS,
                                   start=float(s), end=float(s + 1), strike=k, kind=kind)
            assert math.isclose(got, ref, rel_tol=1e-10)


def test_yoy_forward_and_caplets_against_simulation():
    # Reference: Monte Carlo from this model's own Q set, within 4 standard errors (antithetic
    # pairs: standard error on pair averages): E_Q[(I_T/I_S)/B_T] = P_n(0,T) (1 + F(S,T)) (the
    # definition of the forward under the T-forward measure) and E_Q[payoff/B_T] for caplets and
    # floorlets at three strikes; the ZCIIS leg E_Q[(I_T/I_0)/B_T] = P_r(0,T) is model
    # independent (Brigo and Mercurio 2006, ch. 15.2).
    model = _model()
    times = np.arange(0.0, 11.0)
    out = simulate_batch(model, times, measure="market_consistent", n_paths=100_000,
                         rng=np.random.default_rng(515), antithetic=True)
    inv_b = 1.0 / out["cash_account"]
    cpi = out["cpi"]

    def pairs(v: np.ndarray) -> np.ndarray:
        return 0.5 * (v[0::2] + v[1::2])

    def close(v: np.ndarray, target: float) -> bool:
        p = pairs(v)
        return abs(p.mean() - target) < 4.0 * p.std(ddof=1) / math.sqrt(p.size)

    for s, e in [(0, 1), (4, 5), (9, 10)]:
        ratio = cpi[:, e] / cpi[:, s]
        f = yoy_forward(model.nominal_curve, model.real_curve, PARAMS, start=float(s), end=float(e))
        assert close(ratio * inv_b[:, e], float(_pn(e)) * (1.0 + f))
        for k in (0.0, 0.02, 0.04):
            for kind in ("cap", "floor"):
                sign = 1.0 if kind == "cap" else -1.0
                payoff = np.maximum(sign * (ratio - 1.0 - k), 0.0)
                closed = yoy_caplet_price(model.nominal_curve, model.real_curve, PARAMS,
                                          start=float(s), end=float(e), strike=k, kind=kind)
                assert close(payoff * inv_b[:, e], closed)
    zc = cpi[:, 10] / CPI0 * inv_b[:, 10]
    assert close(zc, float(_pr(10.0)))
    k_mc = (pairs(zc).mean() / float(_pn(10.0))) ** 0.1 - 1.0
    k_cf = float(zciis_rate(model.nominal_curve, model.real_curve, 10.0))
    assert abs(k_mc - k_cf) < 1e-3  # the same check in rate units (4 SE is ~2e-5 here)


def test_cap_floor_parity_and_yoy_swap():
    # Put-call parity (common practice): cap - floor = sum tau P_n(0,T_i) (F_i - K), the value
    # of the payer YoY swap at K; at the par YoY swap rate the two are equal.
    model = _model()
    n_curve, r_curve = model.nominal_curve, model.real_curve
    par = yoy_swap_rate(n_curve, r_curve, PARAMS, maturity=7.0)
    fwd = [yoy_forward(n_curve, r_curve, PARAMS, start=float(i - 1), end=float(i)) for i in range(1, 8)]
    swap_at = lambda k: sum(float(_pn(i)) * (f - k) for i, f in zip(range(1, 8), fwd, strict=True))  # noqa: E731
    assert abs(swap_at(par)) < 1e-15
    for k in (0.0, 0.015, par, 0.03):
        cap = yoy_cap_price(n_curve, r_curve, PARAMS, maturity=7.0, strike=k, kind="cap")
        floor = yoy_cap_price(n_curve, r_curve, PARAMS, maturity=7.0, strike=k, kind="floor")
        assert math.isclose(cap - floor, swap_at(k), rel_tol=1e-10, abs_tol=1e-15)


def test_yoy_without_rate_volatility_is_black_on_the_index():
    # Limiting case: with (near) deterministic rates, ln(I_T/I_S) has variance sigma_I^2 tau and
    # no convexity term, so the caplet is Black-76 (QuantLib blackFormula) on the ratio of the
    # curves' forwards with volatility sigma_I.
    tiny = JarrowYildirimParams(
        nominal=HullWhiteParams(mean_reversion=A_N, volatility=1e-9),
        real=HullWhiteParams(mean_reversion=A_R, volatility=1e-9),
        inflation_volatility=0.02, correlation_nominal_real=R_NR,
        correlation_nominal_inflation=R_NI, correlation_real_inflation=R_RI,
    )
    model = _model(tiny)
    s, e, k = 3.0, 4.0, 0.02
    fwd = float(_pn(s) * _pr(e) / (_pn(e) * _pr(s)))
    ref = ql.blackFormula(ql.Option.Call, 1.0 + k, fwd, 0.02, float(_pn(e)))
    got = yoy_caplet_price(model.nominal_curve, model.real_curve, tiny, start=s, end=e, strike=k)
    assert math.isclose(got, ref, rel_tol=1e-7)
