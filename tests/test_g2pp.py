"""G2++ closed forms against QuantLib's ``G2`` model and ``G2SwaptionEngine``, quadrature of the
defining integrals, and the Hull-White limiting cases.

References: QuantLib 1.44 ``ql.G2(curve, a, sigma, b, eta, rho)`` (``discountBond(t, T,
Array([x, y]))``, ``discountBondOption``) and ``ql.G2SwaptionEngine(model, range, intervals)``,
which implement Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006,
ch. 4.2 (eqs. 4.10, 4.14 and 4.31 there, equation numbers from memory). QuantLib's engine
finds the exercise level ``y_bar(x)`` with a Brent tolerance of 1e-6 and integrates by the
trapezoid rule (``SegmentIntegral``); with 10 standard deviations and 400 intervals it agrees
with a run at 12 and 2000 to about 1e-11 relative, and the root tolerance leaves a relative
error of a few 1e-10 on cheap out-of-the-money options: we compare at relative 1e-8.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql
from oracles.g2pp_equity import (
    G2EquityParams,
    G2PlusPlusEquityModel,
    G2PricesOfRisk,
    equity_option_price,
)
from scipy.integrate import quad

from pqflow.calibration.g2pp_swaptions import g2pp_swaption_price
from pqflow.calibration.swaptions import (
    fixed_leg_schedule,
    forward_swap_rate,
    hull_white_swaption_price,
    swap_annuity,
)
from pqflow.market.curve import LogDiscountCurve
from pqflow.models import g2pp
from pqflow.models.equity import equity_option_price as hw_equity_option_price
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.total_return import TotalReturnIndex

__all__: list[str] = []

TODAY = ql.Date(15, 1, 2025)
DC = ql.Actual365Fixed()
PILLARS = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0])
SLOPED = LogDiscountCurve.from_zero_rates(
    PILLARS, np.array([0.021, 0.022, 0.024, 0.025, 0.027, 0.028, 0.030, 0.031, 0.031, 0.030])
)
FLAT = LogDiscountCurve.from_zero_rates(PILLARS, np.full(PILLARS.size, 0.03))
NEGATIVE = LogDiscountCurve.from_zero_rates(PILLARS, np.full(PILLARS.size, -0.004))
# Invented parameter sets: a fast and a slow factor strongly anti-correlated (the usual shape of
# a fitted G2++), and two similar factors with a positive correlation.
PARAMS = [
    G2PlusPlusParams(a=0.5, sigma=0.01, b=0.05, eta=0.008, rho=-0.7),
    G2PlusPlusParams(a=0.15, sigma=0.006, b=0.08, eta=0.009, rho=0.3),
]


def _date(t: float) -> ql.Date:
    # a QuantLib convention: dates from day counts so Actual365Fixed year fractions are exact.
    return TODAY + int(round(t * 365))


def _ql_curve(curve, times) -> ql.YieldTermStructureHandle:
    """QuantLib discount curve through our discount factors at ``times`` (today first)."""
    ts = np.unique(np.concatenate(([0.0], np.asarray(times, dtype=float), [curve.max_maturity])))
    dfs = [1.0] + [float(curve.discount(t)) for t in ts[1:]]
    return ql.YieldTermStructureHandle(ql.DiscountCurve([_date(t) for t in ts], dfs, DC))


def _ql_model(curve, p: G2PlusPlusParams, times) -> ql.G2:
    ql.Settings.instance().evaluationDate = TODAY
    return ql.G2(_ql_curve(curve, times), p.a, p.sigma, p.b, p.eta, p.rho)


def _ql_swaption(curve, p, *, expiry, tenor, strike, kind, n_sd=10.0, intervals=400) -> float:
    ql.Settings.instance().evaluationDate = TODAY
    times, _ = fixed_leg_schedule(expiry, tenor)
    handle = _ql_curve(curve, np.concatenate(([expiry], times)))
    schedule = ql.Schedule([_date(expiry)] + [_date(t) for t in times])
    index = ql.IborIndex("pq", ql.Period(12, ql.Months), 0, ql.EURCurrency(), ql.NullCalendar(),
                         ql.Unadjusted, False, DC, handle)
    swap_type = ql.Swap.Payer if kind == "payer" else ql.Swap.Receiver
    swap = ql.VanillaSwap(swap_type, 1.0, schedule, strike, DC, schedule, index, 0.0, DC)
    swaption = ql.Swaption(swap, ql.EuropeanExercise(_date(expiry)))
    model = ql.G2(handle, p.a, p.sigma, p.b, p.eta, p.rho)
    swaption.setPricingEngine(ql.G2SwaptionEngine(model, n_sd, intervals))
    return swaption.NPV()


def _quad(fn, lo, hi) -> float:
    return quad(fn, lo, hi, epsabs=0.0, epsrel=1e-13, limit=400)[0]


# ------------------------------------------------------------------------ kernel integrals
@pytest.mark.parametrize(
    "k, c", [(0.5, 0.05), (1e-4, 0.3), (2.0, 1e-5), (1e-3, 1e-3), (0.7, 0.7), (3.0, 0.9)]
)
def test_kernel_integrals_match_quadrature_in_every_regime(k, c):
    # Reference: the defining integrals J = int_0^u e^{-k s} B_c(s) ds and K = int_0^u B_k B_c ds
    # by scipy quad, across the series / incomplete-gamma / closed-form regimes (k u, c u from
    # 1e-5 to 600).
    u = np.array([1.0 / 12.0, 1.0, 5.0, 30.0, 200.0])
    bk = lambda s: -math.expm1(-k * s) / k  # noqa: E731
    bc = lambda s: -math.expm1(-c * s) / c  # noqa: E731
    j_ref = [_quad(lambda s: math.exp(-k * s) * bc(s), 0.0, ui) for ui in u]
    k_ref = [_quad(lambda s: bk(s) * bc(s), 0.0, ui) for ui in u]
    assert np.allclose(g2pp.exp_b_integral(k, c, u), j_ref, rtol=1e-12, atol=0.0)
    assert np.allclose(g2pp.b_b_integral(k, c, u), k_ref, rtol=1e-12, atol=0.0)


@pytest.mark.parametrize("p", PARAMS + [G2PlusPlusParams(a=1e-4, sigma=0.01, b=2.0, eta=0.02, rho=-0.9)])
def test_integrated_variance_matches_ito_isometry(p):
    # Reference: V(u) = Var int_0^u (x + y) ds = int_0^u [sigma^2 B_a(s)^2 + eta^2 B_b(s)^2 +
    # 2 rho sigma eta B_a(s) B_b(s)] ds (Ito isometry; Brigo and Mercurio 2006, eq. 4.10, from
    # memory), by quad.
    def integrand(s: float) -> float:
        ba, bb = -math.expm1(-p.a * s) / p.a, -math.expm1(-p.b * s) / p.b
        return p.sigma**2 * ba**2 + p.eta**2 * bb**2 + 2 * p.rho * p.sigma * p.eta * ba * bb

    for u in (0.25, 3.0, 40.0):
        assert float(g2pp.integrated_variance(p, u)) == pytest.approx(_quad(integrand, 0.0, u), rel=1e-12)


def test_shift_integrates_to_the_curve_plus_half_the_variance():
    # Reference: exp(-int_0^t phi) = P(0,t) exp(-V(t)/2), the condition that fits today's curve
    # (Brigo and Mercurio 2006, ch. 4.2, eq. 4.12, from memory); phi integrated by quad on the
    # flat curve, whose forward is exactly 3%.
    p = PARAMS[0]
    for t in (1.0, 7.5, 25.0):
        integral = _quad(lambda s: float(g2pp.phi(FLAT, p, s)), 0.0, t)
        expected = -math.log(float(FLAT.discount(t))) + 0.5 * float(g2pp.integrated_variance(p, t))
        assert integral == pytest.approx(expected, rel=1e-11)


# ------------------------------------------------------------------ bonds and bond options
@pytest.mark.parametrize("p", PARAMS)
def test_bond_prices_match_quantlib(p):
    cases = [(3.0, 7.0, 0.01, -0.02), (3.0, 13.0, -0.005, 0.004), (7.0, 13.0, 0.0, 0.0),
             (1.0, 30.0, 0.03, 0.01)]
    model = _ql_model(SLOPED, p, [t for c in cases for t in c[:2]])
    for t, big_t, x, y in cases:
        ours = float(g2pp.zcb_price(SLOPED, p, t, big_t - t, x, y))
        # Reference: QuantLib G2.discountBond(t, T, [x, y]) = A(t,T) e^{-B_a x - B_b y}.
        ref = model.discountBond(t, big_t, ql.Array([x, y]))
        assert ours == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize("p", PARAMS)
@pytest.mark.parametrize("kind", ["call", "put"])
def test_zero_bond_options_match_quantlib(p, kind):
    cases = [(3.0, 7.0, 0.9), (3.0, 13.0, 0.8), (7.0, 13.0, 0.85), (1.0, 2.0, 0.98)]
    model = _ql_model(SLOPED, p, [t for c in cases for t in c[:2]])
    for expiry, maturity, strike in cases:
        ours = g2pp.zero_bond_option(SLOPED, p, expiry=expiry, bond_maturity=maturity,
                                     strike=strike, kind=kind)
        # Reference: QuantLib G2.discountBondOption (Black's formula with G2's sigma_P).
        ref = model.discountBondOption(ql.Option.Call if kind == "call" else ql.Option.Put,
                                       strike, expiry, maturity)
        assert ours == pytest.approx(ref, rel=1e-12)


# -------------------------------------------------------------------------------- swaptions
@pytest.mark.parametrize("p", PARAMS, ids=["fast-slow", "similar"])
@pytest.mark.parametrize("expiry, tenor", [(1.0, 1.0), (1.0, 5.0), (5.0, 10.0), (10.0, 5.0), (2.0, 20.0)])
@pytest.mark.parametrize("moneyness", [0.0, -0.01, 0.01])
def test_swaptions_match_quantlib_g2_engine(p, expiry, tenor, moneyness):
    strike = forward_swap_rate(SLOPED, expiry, tenor) + moneyness
    for kind in ("payer", "receiver"):
        ours = g2pp_swaption_price(SLOPED, p, expiry=expiry, tenor=tenor, strike=strike, kind=kind)
        # Reference: QuantLib G2SwaptionEngine(model, 10, 400); relative 1e-8 (module docstring).
        ref = _ql_swaption(SLOPED, p, expiry=expiry, tenor=tenor, strike=strike, kind=kind)
        assert ours == pytest.approx(ref, rel=1e-8)


def test_negative_rates_swaption_matches_quantlib():
    # Negative strike: coupons before the last are negative; the exercise level is still unique.
    p = PARAMS[0]
    fwd = forward_swap_rate(NEGATIVE, 2.0, 5.0)
    assert fwd < 0.0
    for kind in ("payer", "receiver"):
        ours = g2pp_swaption_price(NEGATIVE, p, expiry=2.0, tenor=5.0, kind=kind)
        # Reference: QuantLib G2SwaptionEngine, relative 1e-8.
        ref = _ql_swaption(NEGATIVE, p, expiry=2.0, tenor=5.0, strike=fwd, kind=kind)
        assert ours == pytest.approx(ref, rel=1e-8)


def test_payer_minus_receiver_is_the_forward_swap():
    # Reference: put-call parity of swaptions (model-free, common practice): payer - receiver =
    # P(0,T0) - P(0,Tn) - K A.
    p = PARAMS[0]
    for expiry, tenor, strike in [(3.0, 7.0, 0.02), (10.0, 10.0, 0.04)]:
        payer = g2pp_swaption_price(SLOPED, p, expiry=expiry, tenor=tenor, strike=strike)
        receiver = g2pp_swaption_price(SLOPED, p, expiry=expiry, tenor=tenor, strike=strike, kind="receiver")
        swap = float(SLOPED.discount(expiry) - SLOPED.discount(expiry + tenor)) - strike * swap_annuity(
            SLOPED, expiry, tenor
        )
        assert payer - receiver == pytest.approx(swap, rel=1e-11, abs=1e-14)


@pytest.mark.parametrize("rho", [0.3, -0.6, -0.95])
def test_equal_mean_reversions_reduce_exactly_to_hull_white(rho):
    # Limiting case: with a = b, x + y is one Ornstein-Uhlenbeck process with volatility
    # sqrt(sigma^2 + eta^2 + 2 rho sigma eta), so G2++ is Hull-White (Brigo and Mercurio 2006,
    # ch. 4.2, from memory); pqflow's Jamshidian price is itself checked against QuantLib in
    # tests/test_swaption_calibration.py.
    p = G2PlusPlusParams(a=0.1, sigma=0.01, b=0.1, eta=0.007, rho=rho)
    hw = HullWhiteParams(mean_reversion=0.1, volatility=math.sqrt(0.01**2 + 0.007**2 + 2 * rho * 0.01 * 0.007))
    for expiry, tenor in [(1.0, 5.0), (5.0, 10.0)]:
        for moneyness in (0.0, 0.01, -0.01):
            strike = forward_swap_rate(SLOPED, expiry, tenor) + moneyness
            for kind in ("payer", "receiver"):
                ours = g2pp_swaption_price(SLOPED, p, expiry=expiry, tenor=tenor, strike=strike, kind=kind)
                ref = hull_white_swaption_price(SLOPED, hw, expiry=expiry, tenor=tenor, strike=strike, kind=kind)
                assert ours == pytest.approx(ref, rel=1e-10)


def test_vanishing_second_factor_reduces_to_hull_white():
    # Limiting case: eta -> 0 with rho = 0 leaves Hull-White (a, sigma); the swap-rate variance
    # moves by a relative O(eta^2 / sigma^2) (1e-12 at eta = 1e-8). Either factor may vanish.
    hw = HullWhiteParams(mean_reversion=0.1, volatility=0.01)
    for p in (G2PlusPlusParams(a=0.1, sigma=0.01, b=0.3, eta=1e-8, rho=0.0),
              G2PlusPlusParams(a=0.3, sigma=1e-8, b=0.1, eta=0.01, rho=0.0)):
        for expiry, tenor in [(1.0, 5.0), (5.0, 10.0)]:
            strike = forward_swap_rate(SLOPED, expiry, tenor) + 0.005
            ours = g2pp_swaption_price(SLOPED, p, expiry=expiry, tenor=tenor, strike=strike)
            ref = hull_white_swaption_price(SLOPED, hw, expiry=expiry, tenor=tenor, strike=strike)
            assert ours == pytest.approx(ref, rel=1e-10)


def test_swaption_integral_has_converged():
    # Common practice for a quadrature: refining it (16x the nodes, 12 instead of 10 standard
    # deviations) does not move the price, here at a correlation close to -1.
    p = G2PlusPlusParams(a=0.1, sigma=0.02, b=0.09, eta=0.015, rho=-0.99)
    times, accruals = fixed_leg_schedule(5.0, 10.0)
    strike = forward_swap_rate(SLOPED, 5.0, 10.0)
    coarse = g2pp.swaption_price(SLOPED, p, expiry=5.0, payment_times=times, accruals=accruals, strike=strike)
    fine = g2pp.swaption_price(SLOPED, p, expiry=5.0, payment_times=times, accruals=accruals,
                               strike=strike, n_nodes=3841, n_sd=12.0)
    assert coarse == pytest.approx(fine, rel=1e-12)


# ------------------------------------------------------------------ equity under G2++ rates
def test_equity_option_with_equal_mean_reversions_is_the_hull_white_one():
    # Limiting case: with a = b the rate is Hull-White with sigma_eff, and the equity shock's
    # correlation with the short-rate shock is (sigma rho_xS + eta rho_yS) / sigma_eff. pqflow's
    # Hull-White equity option is checked against QuantLib's AnalyticBSMHullWhiteEngine in
    # tests/test_equity_option.py.
    p = G2PlusPlusParams(a=0.08, sigma=0.01, b=0.08, eta=0.006, rho=-0.4)
    s_eff = math.sqrt(p.sigma**2 + p.eta**2 + 2 * p.rho * p.sigma * p.eta)
    g2_eq = G2EquityParams(name="eq", level=100.0, dividend_yield=0.02, volatility=0.2,
                           correlation_x=0.3, correlation_y=-0.25)
    hw_eq = TotalReturnIndex(kind="equity", name="eq", level=100.0, income_yield=0.02, volatility=0.2,
                         correlation=(p.sigma * 0.3 + p.eta * -0.25) / s_eff)
    hw = HullWhiteParams(mean_reversion=0.08, volatility=s_eff)
    for expiry, strike, kind in [(1.0, 100.0, "call"), (10.0, 80.0, "put"), (25.0, 150.0, "call")]:
        ours = equity_option_price(SLOPED, p, g2_eq, expiry=expiry, strike=strike, kind=kind)
        ref = hw_equity_option_price(SLOPED, hw, hw_eq, expiry=expiry, strike=strike, kind=kind)
        assert ours == pytest.approx(ref, rel=1e-12)


# --------------------------------------------------------------------------------- bad input
def test_bad_parameters_are_rejected_clearly():
    with pytest.raises(ValueError, match="mean reversions"):
        G2PlusPlusParams(a=0.0, sigma=0.01, b=0.1, eta=0.01, rho=0.0)
    with pytest.raises(ValueError, match="volatilities"):
        G2PlusPlusParams(a=0.1, sigma=0.01, b=0.1, eta=-0.01, rho=0.0)
    with pytest.raises(ValueError, match="rho"):
        G2PlusPlusParams(a=0.1, sigma=0.01, b=0.1, eta=0.01, rho=-1.0)
    # (W1, W2, Z) with rho = -0.9, rho_xS = 0.6, rho_yS = 0.6 has determinant
    # 1 - 0.81 - 0.36 - 0.36 - 2(0.9)(0.36) < 0: not a correlation matrix (common practice).
    equity = G2EquityParams(name="eq", level=1.0, dividend_yield=0.0, volatility=0.2,
                            correlation_x=0.6, correlation_y=0.6)
    with pytest.raises(ValueError, match="positive definite"):
        G2PlusPlusEquityModel(
            curve=SLOPED, rates=G2PlusPlusParams(a=0.5, sigma=0.01, b=0.05, eta=0.01, rho=-0.9),
            equity=equity, prices_of_risk=G2PricesOfRisk(x=0.0, y=0.0, equity=0.0), bond_maturities=(),
        )
    with pytest.raises(ValueError, match="expiry"):
        g2pp.zero_bond_option(SLOPED, PARAMS[0], expiry=5.0, bond_maturity=3.0, strike=0.9)
