"""The composite economy model against the single-part models it generalises.

Each single-part model (Hull-White + equity, G2++ + equity, Jarrow-Yildirim inflation) is
checked against QuantLib and quadrature in its own test file; here the economy built from the
same parameters must give the same step laws and columns to rounding (1e-12), and a model with
several indices must be positive definite and simulate the configured driver correlations.
"""

from __future__ import annotations

import numpy as np
import pytest
from oracles.g2pp_equity import G2EquityParams, G2PlusPlusEquityModel, G2PricesOfRisk
from oracles.hull_white_equity import HullWhiteEquityModel, HullWhitePricesOfRisk
from oracles.jarrow_yildirim import InflationPricesOfRisk, JarrowYildirimModel
from scipy.stats import norm

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.economy import EconomyModel, InflationPart, TotalReturnIndex
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.jarrow_yildirim import JarrowYildirimParams
from pqflow.models.schedule import PiecewiseConstant

PILLARS = np.arange(1, 80 * 12 + 1) / 12.0


def _curve(level: float, slope: float) -> LogDiscountCurve:
    zero = level + slope * (1.0 - np.exp(-PILLARS / 3.0)) / (PILLARS / 3.0)  # invented shape
    return LogDiscountCurve(maturities=PILLARS, discount_factors=np.exp(-zero * PILLARS))


NOMINAL = _curve(0.032, -0.012)
REAL = _curve(0.011, -0.015)
HW = HullWhiteParams(mean_reversion=0.05, volatility=0.009)
VOL = PiecewiseConstant(knots=(0.0, 2.5, 5.5), values=(0.2, 0.16, 0.18))
LAM_R = PiecewiseConstant(knots=(0.0, 3.0), values=(0.2, -0.1))
LAM_S = PiecewiseConstant(knots=(0.0, 2.5, 5.5), values=(0.15, 0.2, 0.18))
STEPS = [(0.0, 1.0), (1.0, 2.0), (2.0, 3.5), (2.4, 2.6), (5.0, 6.0), (0.0, 1.0 / 12.0), (10.0, 10.0 + 1.0 / 365.0)]


def _close(a: np.ndarray, b: np.ndarray, rel: float = 1e-12) -> None:
    scale = np.maximum(np.abs(b), np.max(np.abs(b)) * 1e-6)
    assert np.all(np.abs(a - b) <= rel * scale + 1e-300), np.max(np.abs(a - b) / scale)


def _compare_laws(econ, single) -> None:
    for t0, t1 in STEPS:
        le, ls = econ.step_law(t0, t1), single.step_law(t0, t1)
        for name in ("transition", "drift", "real_world_shift"):
            _close(getattr(le, name), getattr(ls, name))
        _close(le.chol @ le.chol.T, ls.chol @ ls.chol.T)


def test_hull_white_with_one_index_is_the_hull_white_equity_model():
    rho = -0.25
    single = HullWhiteEquityModel(
        curve=NOMINAL, rates=HW,
        equity=TotalReturnIndex(kind="equity", name="eq", level=100.0, income_yield=0.02,
                                volatility=VOL, correlation=rho),
        prices_of_risk=HullWhitePricesOfRisk(rates=LAM_R, equity=LAM_S), bond_maturities=(1.0, 10.0),
    )
    econ = EconomyModel(
        curve=NOMINAL, rates=HW,
        parts=(TotalReturnIndex(name="eq", kind="equity", level=100.0, income_yield=0.02, volatility=VOL),),
        correlation=np.array([[1.0, rho], [rho, 1.0]]),
        prices_of_risk={"rates": LAM_R, "eq": LAM_S}, bond_maturities=(1.0, 10.0),
    )
    assert econ.state_names == ("x", "integral_x", "log_equity_eq")
    _close(econ.initial_state(), single.initial_state())
    _compare_laws(econ, single)
    times = np.array([0.0, 1.0, 5.0, 20.0])
    states = np.random.default_rng(1).normal(size=(4, 4, 3)) * [0.01, 0.05, 0.3] + single.initial_state()
    ce, cs = econ.columns(times, states), single.columns(times, states)
    assert set(ce) == set(cs)
    for c in cs:
        _close(ce[c], cs[c])


def test_g2pp_with_one_index_is_the_g2pp_equity_model():
    g2 = G2PlusPlusParams(a=0.5, sigma=0.01, b=0.05, eta=0.008, rho=-0.6)
    rx, ry = 0.2, -0.1
    lx, ly = PiecewiseConstant(knots=(0.0, 3.0), values=(0.2, -0.1)), 0.1
    single = G2PlusPlusEquityModel(
        curve=NOMINAL, rates=g2,
        equity=G2EquityParams(name="eq", level=50.0, dividend_yield=0.01, volatility=VOL, correlation_x=rx,
                              correlation_y=ry),
        prices_of_risk=G2PricesOfRisk(x=lx, y=ly, equity=LAM_S), bond_maturities=(2.0, 10.0),
    )
    econ = EconomyModel(
        curve=NOMINAL, rates=g2,
        parts=(TotalReturnIndex(name="eq", kind="equity", level=50.0, income_yield=0.01, volatility=VOL),),
        correlation=np.array([[1.0, -0.6, rx], [-0.6, 1.0, ry], [rx, ry, 1.0]]),
        prices_of_risk={"rates_x": lx, "rates_y": ly, "eq": LAM_S}, bond_maturities=(2.0, 10.0),
    )
    _compare_laws(econ, single)
    times = np.array([0.0, 1.0, 5.0])
    states = np.random.default_rng(2).normal(size=(3, 3, 4)) * [0.01, 0.01, 0.05, 0.3]
    ce, cs = econ.columns(times, states), single.columns(times, states)
    for c in cs:
        _close(ce[c], cs[c])


def test_hull_white_with_inflation_is_the_jarrow_yildirim_model():
    real = HullWhiteParams(mean_reversion=0.1, volatility=0.006)
    nr, ni, ri = 0.4, 0.1, -0.3
    lam_i = PiecewiseConstant(knots=(0.0, 2.5), values=(0.25, -0.2))
    single = JarrowYildirimModel(
        nominal_curve=NOMINAL, real_curve=REAL,
        params=JarrowYildirimParams(nominal=HW, real=real, inflation_volatility=0.012,
                                    correlation_nominal_real=nr, correlation_nominal_inflation=ni,
                                    correlation_real_inflation=ri),
        prices_of_risk=InflationPricesOfRisk(nominal=LAM_R, real=0.15, inflation=lam_i),
        bond_maturities=(10.0,), real_bond_maturities=(5.0, 10.0), cpi_base=104.0,
    )
    econ = EconomyModel(
        curve=NOMINAL, rates=HW,
        parts=(InflationPart(real_curve=REAL, real=real, inflation_volatility=0.012, cpi_base=104.0,
                             real_bond_maturities=(5.0, 10.0)),),
        correlation=np.array([[1.0, nr, ni], [nr, 1.0, ri], [ni, ri, 1.0]]),
        prices_of_risk={"rates": LAM_R, "real_rate": 0.15, "inflation": lam_i}, bond_maturities=(10.0,),
    )
    # state orders differ: economy (x, X, y, C), Jarrow-Yildirim (x, y, X, C)
    perm = [0, 2, 1, 3]
    for t0, t1 in STEPS:
        le, ls = econ.step_law(t0, t1), single.step_law(t0, t1)
        _close(le.transition, ls.transition[np.ix_(perm, perm)])
        _close(le.drift, ls.drift[perm])
        _close(le.real_world_shift, ls.real_world_shift[perm])
        _close(le.chol @ le.chol.T, (ls.chol @ ls.chol.T)[np.ix_(perm, perm)])
    times = np.array([0.0, 1.0, 5.0])
    states = np.random.default_rng(3).normal(size=(3, 3, 4)) * [0.01, 0.05, 0.01, 0.1]
    ce, cs = econ.columns(times, states), single.columns(times, states[:, :, perm])
    assert set(ce) == set(cs)
    for c in cs:
        _close(ce[c], cs[c])


def _balance_sheet_model() -> EconomyModel:
    names = ("rates", "eq_home", "eq_world", "prop", "real_rate", "inflation")
    corr = np.array([
        [1.00, -0.20, -0.10, -0.15, 0.40, 0.10],
        [-0.20, 1.00, 0.70, 0.50, -0.10, 0.05],
        [-0.10, 0.70, 1.00, 0.40, -0.05, 0.00],
        [-0.15, 0.50, 0.40, 1.00, 0.00, 0.20],
        [0.40, -0.10, -0.05, 0.00, 1.00, -0.30],
        [0.10, 0.05, 0.00, 0.20, -0.30, 1.00],
    ])  # invented, positive definite
    assert np.linalg.eigvalsh(corr)[0] > 0.1
    return EconomyModel(
        curve=NOMINAL, rates=HW,
        parts=(
            TotalReturnIndex(name="eq_home", kind="equity", level=100.0, income_yield=0.03, volatility=VOL),
            TotalReturnIndex(name="eq_world", kind="equity", level=80.0, income_yield=0.02, volatility=0.17),
            TotalReturnIndex(name="prop", kind="property", level=60.0, income_yield=0.045, volatility=0.10),
            InflationPart(real_curve=REAL, real=HullWhiteParams(mean_reversion=0.1, volatility=0.006),
                          inflation_volatility=0.012, real_bond_maturities=(10.0,)),
        ),
        correlation=corr,
        prices_of_risk={"rates": LAM_R, "eq_home": 0.2, "eq_world": 0.25, "prop": 0.3, "inflation": 0.1},
        bond_maturities=(5.0,),
    ), names


def test_every_driver_pair_correlates_as_configured():
    """Over a one-day step each driver's increment dominates the noise of one state (x: rates;
    log index: its own driver; real factor: real_rate; log CPI: inflation), so the sample
    correlation of those noises must match the configured matrix within its Fisher-z interval
    (common practice; the exact step covariance differs from it by O(dt))."""
    model, names = _balance_sheet_model()
    law = model.step_law(3.0, 3.0 + 1.0 / 365.0)
    n = 200_000
    z = np.random.default_rng(20261202).standard_normal((law.chol.shape[0], n))
    noise = law.chol @ z
    states_for = [0, 2, 3, 4, 5, 6]  # x, equity logs (3), real factor, log CPI
    sample = np.corrcoef(noise[states_for])
    corr = model.correlation
    half_width = norm.ppf(1 - 0.01 / 2 / 15) / np.sqrt(n - 3)  # Bonferroni over 15 pairs
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            gap = abs(np.arctanh(sample[i, j]) - np.arctanh(corr[i, j]))
            assert gap <= half_width + 2e-3, (names[i], names[j], sample[i, j], corr[i, j])
    # and the exact noise correlation over a day is within 2e-3 of the configured one
    cov = law.chol @ law.chol.T
    sd = np.sqrt(np.diag(cov))[states_for]
    exact = cov[np.ix_(states_for, states_for)] / np.outer(sd, sd)
    assert np.max(np.abs(exact - corr)) < 2e-3


def test_several_indices_each_price_and_reweight_consistently():
    """Per index: E_Q[S_t / B_t] = S_0 exactly in law (the mean of the log index under Q is the
    lognormal martingale condition), and the real-world shift of the log index is
    int sigma_S lambda_S + the rates part (Girsanov)."""
    model, _ = _balance_sheet_model()
    times = np.linspace(0.0, 10.0, 41)
    mean = model.initial_state()
    cov = np.zeros((mean.size, mean.size))
    for t0, t1 in zip(times[:-1], times[1:], strict=True):
        law = model.step_law(t0, t1)
        mean = law.transition @ mean + law.drift
        cov = law.transition @ cov @ law.transition.T + law.chol @ law.chol.T
    # E[S_T / B_T] with ln S_T - I_T Gaussian: exp(mean + var/2) / deterministic cash factor
    from pqflow.models.hull_white import integrated_variance
    cash_det = np.exp(0.5 * float(integrated_variance(HW, 10.0))) / float(NOMINAL.discount(10.0))
    for j, idx in enumerate(model.indices):
        row = 2 + j
        v = cov[row, row] - 2 * cov[row, 1] + cov[1, 1]
        ratio = np.exp(mean[row] - mean[1] + 0.5 * v) / cash_det
        assert ratio == pytest.approx(idx.level, rel=1e-10)
    # index-linked bond maturing at T deflated in nominal terms: E[I_T / B_T] = I_0 P_r(0, T)
    v = cov[-1, -1] - 2 * cov[-1, 1] + cov[1, 1]
    assert np.exp(mean[-1] - mean[1] + 0.5 * v) / cash_det == pytest.approx(float(REAL.discount(10.0)), rel=1e-10)


def test_bad_parts_are_refused():
    model, _ = _balance_sheet_model()
    with pytest.raises(ValueError, match="unknown drivers"):
        EconomyModel(curve=NOMINAL, rates=HW, parts=model.parts, correlation=model.correlation,
                     prices_of_risk={"nope": 0.1}, bond_maturities=(5.0,))
    with pytest.raises(ValueError, match="6 x 6"):
        EconomyModel(curve=NOMINAL, rates=HW, parts=model.parts, correlation=np.eye(5),
                     prices_of_risk={}, bond_maturities=(5.0,))
    bad = model.correlation.copy()
    bad[1, 2] = bad[2, 1] = -0.99
    with pytest.raises(ValueError, match="positive definite"):
        EconomyModel(curve=NOMINAL, rates=HW, parts=model.parts, correlation=bad,
                     prices_of_risk={}, bond_maturities=(5.0,))
    clash = TotalReturnIndex(name="inflation", kind="property", level=1.0, income_yield=0.0, volatility=0.1)
    with pytest.raises(ValueError, match="repeated: \\['inflation'\\]"):
        EconomyModel(curve=NOMINAL, rates=HW, parts=(*model.parts, clash), correlation=np.eye(7),
                     prices_of_risk={}, bond_maturities=(5.0,))


def test_whole_grid_laws_equal_the_laws_step_by_step():
    """The vectorised grid computation is the same closed form as one step at a time."""
    model, _ = _balance_sheet_model()
    times = np.concatenate([np.arange(0, 3, 1 / 12), np.arange(3, 12, 1.0)])  # knots inside steps too
    stacked = model.step_laws(times)
    for k in range(times.size - 1):
        one = model.step_law(times[k], times[k + 1])
        for name in ("transition", "drift", "chol", "real_world_shift"):
            _close(getattr(stacked, name)[k], getattr(one, name), rel=1e-13)


def test_a_new_gaussian_part_plugs_in_without_touching_the_economy():
    """A part written here, outside the package: an Ornstein-Uhlenbeck spread factor
    ``dz = -k z dt + s dW_z`` with its own driver. The economy simulates it with the exact OU
    transition (mean e^{-kD} z_0, variance s^2 (1 - e^{-2kD}) / (2k); Uhlenbeck and Ornstein
    1930, common practice) and correlates it with the other drivers as configured."""
    from dataclasses import dataclass

    from pqflow.models.economy import GaussianPart
    from pqflow.models.kernels import Exposure

    @dataclass(frozen=True)
    class SpreadFactor:
        k: float = 0.7
        s: float = 0.004
        drivers: tuple = ("spread",)
        state_names: tuple = ("z",)

        def initial_state(self):
            return np.array([0.002])

        def exposures(self, integral):
            return ((Exposure(driver="spread", kind="exp", rate=self.k, scale=self.s),),)

        def step_rows(self, times, rates, correlation):
            dt = np.diff(times)
            return np.zeros((dt.size, 1, rates.b_rows.shape[1])), np.exp(-self.k * dt)[:, None,
                                                                                       None], np.zeros((dt.size, 1))

        def known_columns(self):
            return ("spread_factor",)

        def columns(self, times, states, wanted):
            return {"spread_factor": states[:, :, 0].copy()} if "spread_factor" in wanted else {}

        def column_units(self):
            return {"spread_factor": "decimal"}

    part = SpreadFactor()
    assert isinstance(part, GaussianPart)
    rho = 0.3
    econ = EconomyModel(
        curve=NOMINAL, rates=HW,
        parts=(TotalReturnIndex(name="eq", kind="equity", level=1.0, income_yield=0.0, volatility=0.2), part),
        correlation=np.array([[1.0, 0.0, 0.0], [0.0, 1.0, rho], [0.0, rho, 1.0]]),
        prices_of_risk={}, bond_maturities=(5.0,),
    )
    law = econ.step_law(2.0, 3.0)
    k, s = part.k, part.s
    assert law.transition[3, 3] == pytest.approx(np.exp(-k))
    cov = law.chol @ law.chol.T
    assert cov[3, 3] == pytest.approx(s**2 * (1 - np.exp(-2 * k)) / (2 * k), rel=1e-12)
    # covariance with the equity's own noise: rho s sigma int_0^1 e^{-k u} du
    assert cov[3, 2] - cov[3, 1] == pytest.approx(rho * s * 0.2 * (1 - np.exp(-k)) / k, rel=1e-12)
    assert "spread_factor" in econ.known_columns()
