"""Guarantee values from the scenario files against closed forms.

References used below:
- QuantLib 1.44 (PyPI ``QuantLib``): ``AnalyticBSMHullWhiteEngine`` (European option on an
  equity under Hull-White rates; its ``rho`` is the equity/short-rate correlation, as pinned in
  ``tests/test_equity_option.py``), ``HullWhite.discountBond`` and ``discountBondOption``.
- Jamshidian, F. (1989), "An exact bond option formula", Journal of Finance 44(1): an option on
  a coupon bond under a one-factor short-rate model is a sum of zero-bond options with strikes
  ``P(T, T_k; r*)``; Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed.,
  2006, ch. 3 (the Hull-White case).
- Boyle, P. and Hardy, M. (2003), "Guaranteed annuity options", ASTIN Bulletin 33(2): the GAO
  at retirement pays ``K max(g a(T) - 1, 0)``, ``a(T) = sum_k p_k P(T, T + k)``, i.e. ``g`` calls
  on a coupon bond with strike ``1/g``. With no mortality the annuity is an annuity certain.
- Forward-start options: under deterministic rates an option on the return ``S_j / S_{j-1}``
  with a fixed strike is worth, at ``j - 1``, a Black-Scholes option on a spot of 1 (Rubinstein,
  M. (1991), "Pay now, choose later", Risk 4(2); Hull, *Options, Futures and Other Derivatives*,
  section on forward-start options; both from memory). Yearly returns are independent under
  Black-Scholes with deterministic rates, so an account credited ``max(g, beta R_j)`` each year
  is worth ``A_0 P(0, T) prod_j (1 + E[max(g, beta R_j)])``: a product of a strip of
  forward-start options (a cliquet). Undiscounted Black call from QuantLib's ``blackFormula``.
- A zero bond: an account credited a fixed rate ``g`` pays ``A_0 (1 + g)^T`` for sure, worth
  ``A_0 (1 + g)^T P(0, T)`` (common practice).

Monte Carlo values come from runs written with fixed seeds; tolerances are 4 standard errors.
Run A writes half-yearly output times (``steps_per_year = 2``), so these checks also cover the
sub-annual grid (the projection uses the whole-year times only).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
import QuantLib as ql
from conftest import write_toml
from scipy.optimize import brentq

from pqflow.calibration import assemble_calibration
from pqflow.config import load_config
from pqflow.jobs import generate_part, plan_run, write_calibration
from pqflow.liabilities import parse_portfolio, value_run

__all__: list[str] = []

RATE = 0.03
A, SIGMA = 0.05, 0.01
S0, EQ_VOL, RHO = 1000.0, 0.20, -0.3
TODAY = ql.Date(15, 1, 2025)
DAY_COUNT = ql.Actual365Fixed()


def _config(*, sigma: float, steps_per_year: int, scenarios: int, seed: int, bonds: list[int]):
    flat = [1.0, 5.0, 10.0, 20.0, 30.0, 40.0]
    return {
        "run": {"name": "liabilities-reference", "valuation_date": "2025-01-15"},
        "curve": {"kind": "zero_rates", "compounding": "continuous", "maturities": flat,
                  "values": [RATE] * len(flat)},
        "hull_white": {"mean_reversion": A, "volatility": sigma},
        "equity": {"name": "idx", "level": S0, "dividend_yield": 0.0, "volatility": EQ_VOL,
                   "correlation_with_rates": RHO},
        "real_world": {"rates_market_price_of_risk": 0.2, "equity_risk_premium": 0.03},
        "simulation": {"scenarios": scenarios, "horizon_years": 10, "steps_per_year": steps_per_year,
                       "seed": seed, "batch_size": scenarios // 4, "antithetic": True},
        "outputs": {"bond_maturities": bonds},
    }


def _make_run(path, data):
    """A run directory with calibration.json and both sets (no Prefect, no validation)."""
    cfg = load_config(write_toml(path.with_suffix(".toml"), copy.deepcopy(data)))
    cal = assemble_calibration(cfg)
    plan = plan_run(cfg)
    path.mkdir()
    write_calibration(path, cal)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, path)
    return path


@pytest.fixture(scope="module")
def run_a(tmp_path_factory):
    """Hull-White rates (a = 5%, sigma = 1%), equity vol 20%, bonds 1..10 yearly, half-yearly grid."""
    data = _config(sigma=SIGMA, steps_per_year=2, scenarios=8000, seed=2025, bonds=list(range(1, 11)))
    return _make_run(tmp_path_factory.mktemp("liab") / "run_a", data)


@pytest.fixture(scope="module")
def run_b(tmp_path_factory):
    """Deterministic rates in effect (Hull-White sigma 1e-7), annual grid."""
    data = _config(sigma=1e-7, steps_per_year=1, scenarios=8000, seed=77, bonds=[1])
    return _make_run(tmp_path_factory.mktemp("liab") / "run_b", data)


@pytest.fixture(autouse=True)
def _evaluation_date():
    saved = ql.Settings.instance().evaluationDate
    ql.Settings.instance().evaluationDate = TODAY
    yield
    ql.Settings.instance().evaluationDate = saved


def _portfolio(points):
    return parse_portfolio(
        {"portfolio": {"insurer": "Larkspur Mutual Life (invented)", "currency": "VMK"},
         "model_point": points},
        source="test",
    )


def _line(valuation, name):
    g = [grp.name for grp in valuation.groups].index(name)
    return g


def _ql_flat():
    return ql.YieldTermStructureHandle(ql.FlatForward(TODAY, RATE, DAY_COUNT, ql.Continuous, ql.NoFrequency))


def _ql_put_bsm_hw(strike: float, years: int) -> float:
    """QuantLib AnalyticBSMHullWhiteEngine: put on the total-return index (dividend yield 0)."""
    r_ts, q_ts = _ql_flat(), ql.YieldTermStructureHandle(
        ql.FlatForward(TODAY, 0.0, DAY_COUNT, ql.Continuous, ql.NoFrequency))
    vol = ql.BlackVolTermStructureHandle(ql.BlackConstantVol(TODAY, ql.NullCalendar(), EQ_VOL, DAY_COUNT))
    process = ql.BlackScholesMertonProcess(ql.QuoteHandle(ql.SimpleQuote(S0)), q_ts, r_ts, vol)
    option = ql.VanillaOption(ql.PlainVanillaPayoff(ql.Option.Put, strike),
                              ql.EuropeanExercise(TODAY + 365 * years))
    option.setPricingEngine(ql.AnalyticBSMHullWhiteEngine(RHO, process, ql.HullWhite(r_ts, A, SIGMA)))
    return option.NPV()


UL_CASES = [("UL-K900-T10", 900.0, 10), ("UL-K1200-T10", 1200.0, 10), ("UL-K1000-T5", 1000.0, 5)]


def test_maturity_guarantee_matches_quantlib_bsm_hull_white(run_a):
    points = [
        {"id": mp_id, "product": "unit_linked_gmmb", "policies": 1, "age": 40, "term": term,
         "mortality": "none", "premium": S0, "guarantee": strike}
        for mp_id, strike, term in UL_CASES
    ]
    mc = value_run(run_a, _portfolio(points), "market_consistent")
    assert mc.antithetic and mc.sampling_units == 4000
    for mp_id, strike, term in UL_CASES:
        g = _line(mc, mp_id)
        value, se = mc.value[g, 1], mc.std_error[g, 1]
        expected = _ql_put_bsm_hw(strike, term)  # QuantLib AnalyticBSMHullWhiteEngine
        assert abs(value - expected) < 4.0 * se, (mp_id, value, expected, se)
        # Certainty equivalent: the put's payoff on the forward scenario S_T = S_0 / P(0,T),
        # discounted with P(0,T) (the deterministic forward scenario, common practice).
        p0t = np.exp(-RATE * term)
        assert mc.certainty_equivalent[g, 1] == pytest.approx(p0t * max(strike - S0 / p0t, 0.0), abs=1e-9)
        # Best estimate = the fund (a Q-martingale: E[S_T / B_T] = S_0) plus the put.
        assert mc.certainty_equivalent[g, 0] == pytest.approx(S0 + mc.certainty_equivalent[g, 1], rel=1e-12)


def _ql_zero_bond_call_sum(g: float, expiry: int, maturities: list[int]) -> float:
    """g x call on the coupon bond sum_k P(T, T+k) with strike 1/g, by Jamshidian (1989):
    root r* of sum_k P(T, T+k; r*) = 1/g with QuantLib's Hull-White bond formula, then the sum
    of QuantLib's zero-bond calls with strikes P(T, T+k; r*)."""
    model = ql.HullWhite(_ql_flat(), A, SIGMA)
    T = float(expiry)

    def excess(r: float) -> float:
        return sum(model.discountBond(T, T + k, r) for k in maturities) - 1.0 / g

    r_star = brentq(excess, -1.0, 1.0, xtol=1e-14)
    calls = [
        model.discountBondOption(ql.Option.Call, model.discountBond(T, T + k, r_star), T, T + k)
        for k in maturities
    ]
    return g * sum(calls)


GAO_CASES = [("GAO-g12-T10", 0.12, 10, 10), ("GAO-g11-T10", 0.11, 10, 10), ("GAO-g22-T5", 0.22, 5, 5)]


def test_guaranteed_annuity_option_matches_jamshidian(run_a):
    points = [
        {"id": mp_id, "product": "deferred_annuity_gao", "policies": 1, "age": 55, "term": term,
         "mortality": "none", "accumulation": "fixed", "sum_at_retirement": 1.0,
         "guaranteed_annuity_rate": g, "annuity_term": n}
        for mp_id, g, term, n in GAO_CASES
    ]
    mc = value_run(run_a, _portfolio(points), "market_consistent")
    for mp_id, g, term, n in GAO_CASES:
        line = _line(mc, mp_id)
        value, se = mc.value[line, 1], mc.std_error[line, 1]
        expected = _ql_zero_bond_call_sum(g, term, list(range(1, n + 1)))  # Jamshidian + QuantLib
        assert abs(value - expected) < 4.0 * se, (mp_id, value, expected, se)
        assert se < 0.1 * expected  # the comparison has power
        # Certainty equivalent: the payoff on today's forward bond prices (common practice).
        fwd_annuity = sum(np.exp(-RATE * k) for k in range(1, n + 1))
        ce = np.exp(-RATE * term) * max(g * fwd_annuity - 1.0, 0.0)
        assert mc.certainty_equivalent[line, 1] == pytest.approx(ce, rel=1e-10, abs=1e-14)


def _black_call_on_return(strike: float) -> float:
    """E[(S_j/S_{j-1} - K)^+] under Q, deterministic rate: undiscounted Black call on the
    forward e^r (QuantLib blackFormula, discount 1)."""
    return ql.blackFormula(ql.Option.Call, strike, float(np.exp(RATE)), EQ_VOL, 1.0)


PAR_CASES = [
    # id, guaranteed rate, bonus share, equity share, cash share, term
    ("PAR-b080", 0.02, 0.80, 0.6, 0.4, 10),
    ("PAR-cliquet", 0.00, 1.00, 1.0, 0.0, 5),
    ("PAR-zero-bonus", 0.02, 0.00, 1.0, 0.0, 10),
]


def test_participating_guarantee_matches_forward_start_strip(run_b):
    points = [
        {"id": mp_id, "product": "participating", "policies": 1, "age": 40, "term": term,
         "mortality": "none", "premium": 100.0, "guaranteed_rate": g, "bonus_share": beta,
         "equity_share": w_e, "cash_share": w_c}
        for mp_id, g, beta, w_e, w_c, term in PAR_CASES
    ]
    mc = value_run(run_b, _portfolio(points), "market_consistent")
    growth = np.exp(RATE) - 1.0
    for mp_id, g, beta, w_e, w_c, term in PAR_CASES:
        line = _line(mc, mp_id)
        if beta == 0.0:
            expected_credit = g  # zero bonus share: a fixed rate, the account is a zero bond
        else:
            strike = 1.0 + (g / beta - w_c * growth) / w_e
            expected_credit = g + beta * w_e * _black_call_on_return(strike)  # forward-start call
        expected = 100.0 * np.exp(-RATE * term) * (1.0 + expected_credit) ** term
        # Without the floor the account grows by 1 + beta R_j, E = 1 + beta (e^r - 1).
        expected_guarantee = expected - 100.0 * np.exp(-RATE * term) * (1.0 + beta * growth) ** term
        for q, ref in ((0, expected), (1, expected_guarantee)):
            value, se = mc.value[line, q], mc.std_error[line, q]
            assert abs(value - ref) < 4.0 * se + 1e-9 * abs(expected), (mp_id, q, value, ref, se)
        if beta > 0.0:
            assert mc.std_error[line, 1] < 0.02 * expected_guarantee  # the check has power
