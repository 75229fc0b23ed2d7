"""Hull-White one-factor closed forms against QuantLib and against limiting cases.

References used below:
- QuantLib 1.44 (PyPI ``QuantLib``): ``ql.HullWhite(curve, a, sigma)``, ``discountBond`` and
  ``discountBondOption``.
- Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006: Hull-White
  bond price and bond option (ch. 3.3), Ho-Lee bond price (ch. 3.2; section number from memory).
- ``scipy.integrate.quad`` of the defining integrals ``phi2(a, u) = int_0^u B(s) ds`` and
  ``V(u) = sigma^2 int_0^u B(s)^2 ds``.

Time convention: Actual/365 Fixed, every QuantLib date is ``today + n`` days and the matching
pqflow time is ``n / 365``, so both libraries see bit-identical year fractions.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql
from scipy.integrate import quad

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.hull_white import (
    HullWhiteParams,
    _phi3,
    alpha,
    b_factor,
    integrated_variance,
    phi2,
    zcb_price,
    zero_bond_option,
)

__all__: list[str] = []

TODAY = ql.Date(15, 1, 2025)
DAY_COUNT = ql.Actual365Fixed()
A, SIGMA = 0.08, 0.012
FLAT_RATE = 0.03

# Non-flat curve pillars: days from today and continuously compounded zero rates (an invented
# humped curve). Every comparison on this curve is made at pillar times only, where pqflow's
# PCHIP-on-log-discount curve and QuantLib's log-linear DiscountCurve both return the input
# discount factors exactly.
PILLAR_DAYS = np.array([91, 182, 365, 730, 1095, 1826, 2557, 3652, 5478, 7305, 10957, 14610])
PILLAR_ZEROS = np.array(
    [0.021, 0.023, 0.026, 0.030, 0.032, 0.034, 0.035, 0.0355, 0.034, 0.032, 0.030, 0.029]
)


@pytest.fixture(autouse=True)
def _evaluation_date():
    saved = ql.Settings.instance().evaluationDate
    ql.Settings.instance().evaluationDate = TODAY
    yield
    ql.Settings.instance().evaluationDate = saved


def _flat_pair():
    """The same flat 3% continuously compounded curve in pqflow and QuantLib."""
    curve = LogDiscountCurve.from_zero_rates(np.array([1.0, 30.0, 60.0]), np.full(3, FLAT_RATE))
    handle = ql.YieldTermStructureHandle(
        ql.FlatForward(TODAY, FLAT_RATE, DAY_COUNT, ql.Continuous, ql.NoFrequency)
    )
    return curve, handle


def _humped_pair():
    """The humped curve; QuantLib gets the evaluation date as its first node (a QuantLib convention: include it)."""
    times = PILLAR_DAYS / 365.0
    dfs = np.exp(-PILLAR_ZEROS * times)
    curve = LogDiscountCurve(maturities=times, discount_factors=dfs)
    dates = [TODAY] + [TODAY + int(d) for d in PILLAR_DAYS]
    handle = ql.YieldTermStructureHandle(
        ql.DiscountCurve(dates, [1.0] + [float(p) for p in dfs], DAY_COUNT)
    )
    return curve, handle


def _t(days: int) -> float:
    return days / 365.0


# --------------------------------------------------------------------------------------------
# Zero-coupon bond prices P(t, T | x_t)
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("t_days", "mat_days", "x"),
    [(0, 365, 0.0), (365, 1825, 0.01), (1825, 5475, -0.02), (3650, 14600, 0.005), (730, 731, 0.03)],
)
def test_zcb_price_flat_curve_matches_quantlib(t_days: int, mat_days: int, x: float) -> None:
    curve, handle = _flat_pair()
    params = HullWhiteParams(mean_reversion=A, volatility=SIGMA)
    model = ql.HullWhite(handle, A, SIGMA)
    t, big_t = _t(t_days), _t(mat_days)
    short_rate = x + float(alpha(curve, params, t))  # QuantLib's state is r_t = x_t + alpha(t)
    expected = model.discountBond(t, big_t, short_rate)  # QuantLib HullWhite::discountBond
    got = float(zcb_price(curve, params, t, big_t - t, x))
    assert got == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize(
    ("t_days", "mat_days", "x"),
    [
        (0, 3652, 0.0),
        (365, 1826, 0.012),
        (1826, 5478, -0.015),
        (3652, 14610, 0.004),
        (91, 182, 0.02),
    ],
)
def test_zcb_price_humped_curve_matches_quantlib_at_pillars(
    t_days: int, mat_days: int, x: float
) -> None:
    curve, handle = _humped_pair()
    params = HullWhiteParams(mean_reversion=A, volatility=SIGMA)
    model = ql.HullWhite(handle, A, SIGMA)
    t, big_t = _t(t_days), _t(mat_days)
    # QuantLib's A(t,T) contains exp(B f(0,t)) with its own numerical instantaneous forward
    # f(0,t); r_t = x_t + f(0,t) + sigma^2 B(t)^2 / 2 carries the same f, so it cancels and the
    # price depends only on P(0,t), P(0,T) and x_t -- quantities on which the curves agree.
    f_ql = handle.forwardRate(t, t, ql.Continuous, ql.NoFrequency).rate()
    short_rate = x + f_ql + 0.5 * SIGMA**2 * float(b_factor(A, t)) ** 2
    expected = model.discountBond(t, big_t, short_rate)  # QuantLib HullWhite::discountBond
    got = float(zcb_price(curve, params, t, big_t - t, x))
    assert got == pytest.approx(expected, rel=1e-9)


# --------------------------------------------------------------------------------------------
# Zero-bond options
# --------------------------------------------------------------------------------------------

OPTION_CASES = [
    # (expiry days, bond maturity days, strike as a multiple of the forward bond price)
    (365, 1825, 0.98),
    (365, 1825, 1.02),
    (1825, 3650, 0.95),
    (1825, 3650, 1.0),
    (3650, 10950, 0.9),
    (3650, 10950, 1.1),
    (91, 365, 1.0),
]


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize(("exp_days", "mat_days", "moneyness"), OPTION_CASES)
def test_zero_bond_option_flat_curve_matches_quantlib(
    kind: str, exp_days: int, mat_days: int, moneyness: float
) -> None:
    curve, handle = _flat_pair()
    params = HullWhiteParams(mean_reversion=A, volatility=SIGMA)
    model = ql.HullWhite(handle, A, SIGMA)
    expiry, maturity = _t(exp_days), _t(mat_days)
    strike = moneyness * float(curve.discount(maturity) / curve.discount(expiry))
    ql_type = ql.Option.Call if kind == "call" else ql.Option.Put
    expected = model.discountBondOption(ql_type, strike, expiry, maturity)  # QuantLib
    got = zero_bond_option(
        curve, params, expiry=expiry, bond_maturity=maturity, strike=strike, kind=kind
    )
    assert got == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize(
    ("exp_days", "mat_days", "moneyness"),
    [(365, 1826, 0.97), (1826, 3652, 1.0), (3652, 10957, 1.05), (182, 365, 1.0)],
)
def test_zero_bond_option_humped_curve_matches_quantlib_at_pillars(
    kind: str, exp_days: int, mat_days: int, moneyness: float
) -> None:
    curve, handle = _humped_pair()
    params = HullWhiteParams(mean_reversion=A, volatility=SIGMA)
    model = ql.HullWhite(handle, A, SIGMA)
    expiry, maturity = _t(exp_days), _t(mat_days)
    strike = moneyness * float(curve.discount(maturity) / curve.discount(expiry))
    ql_type = ql.Option.Call if kind == "call" else ql.Option.Put
    expected = model.discountBondOption(ql_type, strike, expiry, maturity)  # QuantLib
    got = zero_bond_option(
        curve, params, expiry=expiry, bond_maturity=maturity, strike=strike, kind=kind
    )
    assert got == pytest.approx(expected, rel=1e-9)


def test_zero_bond_option_put_call_parity() -> None:
    # Put-call parity on a zero bond: C - P = P(0,S) - K P(0,T) (common practice; model free).
    curve, _ = _humped_pair()
    params = HullWhiteParams(mean_reversion=A, volatility=SIGMA)
    for expiry, maturity, strike in [(1.0, 5.0, 0.85), (5.0, 10.0, 0.9), (10.0, 30.0, 0.7)]:
        call = zero_bond_option(curve, params, expiry=expiry, bond_maturity=maturity, strike=strike)
        put = zero_bond_option(
            curve, params, expiry=expiry, bond_maturity=maturity, strike=strike, kind="put"
        )
        forward_value = float(curve.discount(maturity) - strike * curve.discount(expiry))
        assert call - put == pytest.approx(forward_value, rel=1e-12, abs=1e-15)


# --------------------------------------------------------------------------------------------
# Limiting cases
# --------------------------------------------------------------------------------------------


def test_small_mean_reversion_gives_ho_lee_variance() -> None:
    # Ho-Lee (a -> 0): V(u) = sigma^2 u^3 / 3 (Brigo and Mercurio 2006, Ho-Lee model). The
    # Hull-White correction is -sigma^2 a u^4 / 4, relative 3 a u / 4, so allow 1.0 * a * u.
    a = 1e-6
    params = HullWhiteParams(mean_reversion=a, volatility=SIGMA)
    u = np.array([0.01, 0.5, 1.0, 5.0, 10.0, 30.0, 100.0])
    ho_lee = SIGMA**2 * u**3 / 3.0
    got = integrated_variance(params, u)
    assert np.all(np.abs(got / ho_lee - 1.0) <= a * u)
    # int_0^u B(s) ds -> u^2 / 2 in the same limit (B(s) -> s), relative correction a u / 3.
    assert np.all(np.abs(phi2(a, u) / (0.5 * u**2) - 1.0) <= a * u)


def test_small_mean_reversion_bond_price_is_ho_lee() -> None:
    # Ho-Lee bond price (Brigo and Mercurio 2006, ch. 3.2, from memory):
    #   P(t,T) = P(0,T)/P(0,t) exp((T-t) f(0,t) - sigma^2/2 t (T-t)^2 - (T-t) r_t),
    # with r_t = x_t + f(0,t) + sigma^2 t^2 / 2 (the Ho-Lee alpha). On the flat curve f = 3%.
    a = 1e-6
    curve, _ = _flat_pair()
    params = HullWhiteParams(mean_reversion=a, volatility=SIGMA)
    for t, big_t, x in [(1.0, 5.0, 0.01), (5.0, 15.0, -0.02), (10.0, 40.0, 0.0)]:
        r = x + FLAT_RATE + 0.5 * SIGMA**2 * t**2
        tau = big_t - t
        log_ratio = math.log(float(curve.discount(big_t) / curve.discount(t)))
        ho_lee = math.exp(log_ratio + tau * FLAT_RATE - 0.5 * SIGMA**2 * t * tau**2 - tau * r)
        got = float(zcb_price(curve, params, t, tau, x))
        # Hull-White differs from Ho-Lee at first order in a: B(tau) = tau - a tau^2/2 + ... and
        # V(u) = sigma^2 (u^3/3 - a u^4/4 + ...), so |ln(got/ho_lee)| is about
        # a (|x| tau^2/2 + sigma^2 |T^4 - tau^4 - t^4| / 8); allow twice that.
        first_order = a * (abs(x) * tau**2 / 2 + SIGMA**2 * abs(big_t**4 - tau**4 - t**4) / 8)
        assert abs(math.log(got / ho_lee)) <= 2.0 * first_order
        # ... and the Ho-Lee convexity term itself is far larger, so the check has power.
        assert 0.5 * SIGMA**2 * t * big_t * tau > 100.0 * first_order


def test_zero_volatility_gives_deterministic_forward_bond_price() -> None:
    # sigma -> 0: x stays 0 and P(t,T) = P(0,T)/P(0,t), the forward bond price (Brigo and
    # Mercurio 2006, ch. 3.3: the Hull-White price with sigma = 0 is the deterministic one).
    curve, _ = _humped_pair()
    for sigma in [0.0, 1e-10]:
        params = HullWhiteParams(mean_reversion=A, volatility=sigma)
        for t, big_t in [(_t(365), _t(3652)), (_t(1826), _t(10957)), (_t(3652), _t(14610))]:
            forward = float(curve.discount(big_t) / curve.discount(t))
            assert float(zcb_price(curve, params, t, big_t - t, 0.0)) == pytest.approx(
                forward, rel=1e-13
            )


def test_tiny_volatility_bond_option_is_discounted_forward_intrinsic() -> None:
    # sigma -> 0: the bond option is worth max(P(0,S) - K P(0,T), 0) (deterministic limit of
    # Brigo and Mercurio 2006, eq. 3.40; common practice).
    curve, _ = _humped_pair()
    params = HullWhiteParams(mean_reversion=A, volatility=1e-10)
    expiry, maturity = _t(1826), _t(3652)
    fwd = float(curve.discount(maturity) / curve.discount(expiry))
    p_t = float(curve.discount(expiry))
    for strike in [0.9 * fwd, 1.1 * fwd]:
        call = zero_bond_option(curve, params, expiry=expiry, bond_maturity=maturity, strike=strike)
        assert call == pytest.approx(max(p_t * (fwd - strike), 0.0), abs=1e-14)


# --------------------------------------------------------------------------------------------
# The series / direct switch in phi2 and _phi3
# --------------------------------------------------------------------------------------------


def _quad_phi2(a: float, u: float) -> float:
    # phi2(a, u) = int_0^u B(s) ds, B(s) = (1 - e^{-a s}) / a  (definition; scipy quad).
    return quad(lambda s: -math.expm1(-a * s) / a, 0.0, u, epsabs=0.0, epsrel=1e-13, limit=200)[0]


def _quad_phi3(a: float, u: float) -> float:
    # V(u) / sigma^2 = int_0^u B(s)^2 ds (definition; scipy quad).
    return quad(
        lambda s: (math.expm1(-a * s) / a) ** 2, 0.0, u, epsabs=0.0, epsrel=1e-13, limit=200
    )[0]


def _cutoff() -> float:
    from pqflow.models import hull_white

    return hull_white._SERIES_CUTOFF


@pytest.mark.parametrize("a", [0.001, 0.05, 0.3])
def test_series_switch_is_continuous(a: float) -> None:
    # Both branches just below and above a*u = cutoff agree with quad of the defining integrals.
    cutoff = _cutoff()
    for rel_step in [-1e-9, -1e-6, 1e-6, 1e-9]:
        u = cutoff / a * (1.0 + rel_step)
        assert float(phi2(a, u)) == pytest.approx(_quad_phi2(a, u), rel=1e-11)
        assert float(_phi3(a, u)) == pytest.approx(_quad_phi3(a, u), rel=1e-11)
    below, above = cutoff / a * (1.0 - 1e-9), cutoff / a * (1.0 + 1e-9)
    # Continuity across the switch: the change from just below to just above equals the smooth
    # change of the defining integrals over the same gap (relative ~ 4e-9 and 6e-9), to 1e-11.
    for fn, ref in [(phi2, _quad_phi2), (_phi3, _quad_phi3)]:
        jump = float(fn(a, above)) / float(fn(a, below))
        smooth = ref(a, above) / ref(a, below)
        assert abs(jump - smooth) < 1e-11


def test_phi2_phi3_match_quad_across_scales() -> None:
    # From deep in the series branch (a u = 1e-7) to well inside the direct one (a u = 5).
    a = 0.07
    for au in [1e-7, 1e-4, 0.005, 0.0199, 0.0201, 0.05, 0.3, 1.0, 5.0]:
        u = au / a
        assert float(phi2(a, u)) == pytest.approx(_quad_phi2(a, u), rel=1e-11)
        assert float(_phi3(a, u)) == pytest.approx(_quad_phi3(a, u), rel=1e-11)


def test_phi_functions_vectorise_across_the_switch() -> None:
    # One array call straddling the cutoff equals the elementwise quad references.
    a = 0.1
    u = np.array([0.01, 0.1999, 0.2, 0.2001, 2.0, 20.0])
    got2, got3 = phi2(a, u), _phi3(a, u)
    assert got2.shape == u.shape and got3.shape == u.shape
    for k, uk in enumerate(u):
        assert got2[k] == pytest.approx(_quad_phi2(a, float(uk)), rel=1e-11)
        assert got3[k] == pytest.approx(_quad_phi3(a, float(uk)), rel=1e-11)
