"""The equity-volatility bootstrap and the real-world house view under G2++ rates.

G2++ (Brigo and Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 4.2):
``r = x + y + phi(t)``, ``dx = -a x dt + sigma dW1``, ``dy = -b y dt + eta dW2``,
``dW1 dW2 = rho dt``; the equity shock ``Z`` has correlations ``(rho_xS, rho_yS)`` with
``(W1, W2)``. References used below:

* the equity option closed form :func:`oracles.g2pp_equity.equity_option_price` (itself
  checked against QuantLib and quadrature in ``tests/test_g2pp_transition.py``) and Black's
  (1976) formula on the forward written out here;
* the T-forward variance of ``ln(S_T e^{-qT} / P(T,T))`` by ``scipy.integrate.quad`` of its
  variance rate, from the martingale part ``sigma_S dZ + sigma B_a(T-t) dW1 + eta B_b(T-t) dW2``
  (``dP/P = r dt - sigma B_a dW1 - eta B_b dW2``, Brigo and Mercurio 2006, ch. 4.2) and the Ito
  isometry;
* the closed-form real-world means :func:`oracles.g2pp_equity.expected_short_rate` and
  :func:`oracles.g2pp_equity.real_world_factor_means` (checked against quadrature in
  ``tests/test_g2pp_transition.py``), with ``lambda_x = lambda_y = lambda``;
* simulation with :class:`oracles.g2pp_equity.G2PlusPlusEquityModel` and
  :func:`pqflow.simulation.engine.simulate_batch` under the real-world measure. Monte Carlo
  tolerances: 4 standard errors, fixed seeds. The paths are not antithetic: the short rate and
  the zero yield are linear in the normals, so an antithetic pair average is the exact mean and
  its standard error is zero (nothing to test against).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from oracles import g2pp_equity
from oracles.g2pp_equity import G2EquityParams, G2PlusPlusEquityModel, G2PricesOfRisk
from scipy.integrate import quad
from scipy.stats import norm

from pqflow.calibration.equity_vol import (
    EquityVolQuote,
    PiecewiseEquityVolatility,
    calibrate_equity_volatility,
    equity_option_price_piecewise,
    piecewise_equity_total_variance,
)
from pqflow.errors import MarketDataError
from pqflow.market.curve import LogDiscountCurve
from pqflow.measure.house_view import (
    model_target_value,
    rates_price_of_risk_for_path,
    target_path,
    today_value,
)
from pqflow.measure.prices_of_risk import (
    PricesOfRisk,
    expected_short_rate,
    rates_price_of_risk_for_target,
    real_world_factor_mean,
)
from pqflow.models.g2pp import G2PlusPlusParams, phi, zcb_price
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.schedule import PiecewiseConstant
from pqflow.simulation.engine import simulate_batch

__all__: list[str] = []

# Invented parameters (a fast and a slow factor, negatively correlated, as G2++ fits usually are).
A, SIGMA, B, ETA, RHO = 0.5, 0.01, 0.05, 0.008, -0.7
G2 = G2PlusPlusParams(a=A, sigma=SIGMA, b=B, eta=ETA, rho=RHO)
PILLARS = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0, 40.0])
CURVE = LogDiscountCurve.from_zero_rates(
    PILLARS, np.array([0.021, 0.022, 0.024, 0.025, 0.027, 0.028, 0.030, 0.031, 0.031, 0.032, 0.033])
)
VOLS = PiecewiseEquityVolatility(
    bucket_ends=np.array([1.0, 3.0, 7.0]), volatilities=np.array([0.24, 0.17, 0.21])
)
S0, Q_DIV = 100.0, 0.015
CORRELATION_PAIRS = [(0.25, -0.3), (-0.5, -0.2), (0.0, 0.0)]


def _ba(u: float) -> float:
    return -math.expm1(-A * u) / A


def _bb(u: float) -> float:
    return -math.expm1(-B * u) / B


def _variance_by_quadrature(vol, rx, ry, expiry):
    """int_0^T [s^2 + 2 s (rx sigma B_a + ry eta B_b) + sigma^2 B_a^2 + eta^2 B_b^2
    + 2 rho sigma eta B_a B_b] du (B_k at T - u): Ito isometry of the martingale part of
    d ln F (module docstring), by scipy quad split at the bucket ends."""

    def rate(u):
        ba, bb, s = _ba(expiry - u), _bb(expiry - u), float(vol(u))
        return (s * s + 2.0 * s * (rx * SIGMA * ba + ry * ETA * bb) + SIGMA**2 * ba**2
                + ETA**2 * bb**2 + 2.0 * RHO * SIGMA * ETA * ba * bb)

    cuts = [0.0, *[e for e in vol.bucket_ends if e < expiry], expiry]
    return sum(quad(rate, u0, u1, epsabs=0.0, epsrel=1e-13, limit=200)[0] for u0, u1 in zip(cuts, cuts[1:],
                                                                                            strict=False))


def _black(forward, strike, vol, t, df, kind):
    """Black (1976) on the forward, discounted by df (Hull, *Options, Futures and Other
    Derivatives*, Black's model)."""
    sd = vol * math.sqrt(t)
    d1 = math.log(forward / strike) / sd + 0.5 * sd
    if kind == "call":
        return df * (forward * norm.cdf(d1) - strike * norm.cdf(d1 - sd))
    return df * (strike * norm.cdf(sd - d1) - forward * norm.cdf(-d1))


# --------------------------------------------------------------------------------------------
# Equity volatility under G2++
# --------------------------------------------------------------------------------------------


@pytest.mark.parametrize("rx, ry", CORRELATION_PAIRS)
def test_g2_total_variance_matches_quadrature(rx, ry):
    t = np.array([0.5, 2.0, 5.5, 12.0])  # 12y: beyond the last bucket, where the last vol holds
    ours = piecewise_equity_total_variance(G2, VOLS, (rx, ry), t)
    assert ours.shape == t.shape
    for ti, v in zip(t, ours, strict=True):
        # Reference: scipy.integrate.quad of the variance rate (Ito isometry).
        assert v == pytest.approx(_variance_by_quadrature(VOLS, rx, ry, ti), rel=1e-11)


@pytest.mark.parametrize("rx, ry", CORRELATION_PAIRS)
def test_g2_bootstrap_reprices_every_quote_in_the_g2pp_closed_form(rx, ry):
    market = [(1.0, 0.23, None), (2.0, 0.215, 100.0), (3.0, 0.205, 90.0), (5.0, 0.2, None),
              (7.0, 0.195, 115.0), (10.0, 0.19, None)]
    quotes = [EquityVolQuote(expiry=t, implied_vol=v, strike=k) for t, v, k in market[::-1]]
    report = calibrate_equity_volatility(
        CURVE, G2, level=S0, dividend_yield=Q_DIV, correlation=(rx, ry), quotes=quotes
    )
    assert report.correlation == (rx, ry) and report.rates == G2
    ends, vols = report.bucket_ends, report.bucket_vols
    equity = G2EquityParams(
        name="eq", level=S0, dividend_yield=Q_DIV,
        volatility=PiecewiseConstant(knots=(0.0, *ends[:-1]), values=tuple(vols)),
        correlation_x=rx, correlation_y=ry,
    )
    for (t, vol, strike), row in zip(market, report.rows, strict=True):
        df = float(CURVE.discount(t))
        fwd = S0 * math.exp(-Q_DIV * t) / df
        k = fwd if strike is None else strike
        for kind in ("call", "put"):
            # Reference: oracles.g2pp_equity.equity_option_price (independent closed form,
            # QuantLib-checked) with the bootstrapped schedule vs Black (1976) at the quoted vol.
            model = g2pp_equity.equity_option_price(CURVE, G2, equity, expiry=t, strike=k, kind=kind)
            assert model == pytest.approx(_black(fwd, k, vol, t, df, kind), rel=1e-10)
        assert row.strike == pytest.approx(k, rel=1e-14)
        assert abs(row.vol_error) < 1e-10
        # Reference: scipy quadrature of the variance rate at the fitted schedule.
        total = row.equity_variance + row.cross_variance + row.rate_variance
        assert total == pytest.approx(_variance_by_quadrature(report.volatility, rx, ry, t), rel=1e-10)
        assert total == pytest.approx(vol**2 * t, rel=1e-10)
    # the price function of the module agrees with the G2++ closed form at an arbitrary strike
    ours = float(equity_option_price_piecewise(
        CURVE, G2, level=S0, dividend_yield=Q_DIV, correlation=(rx, ry), volatility=report.volatility,
        expiry=4.0, strike=95.0, kind="put",
    ))
    ref = g2pp_equity.equity_option_price(CURVE, G2, equity, expiry=4.0, strike=95.0, kind="put")
    assert ours == pytest.approx(ref, rel=1e-12)


@pytest.mark.parametrize("rho", [-0.5, 0.0, 0.3])
def test_g2_with_a_negligible_second_factor_is_hull_white(rho):
    # Limiting case (Brigo and Mercurio 2006, ch. 4.2: with eta -> 0 and the equity uncorrelated
    # with W2, G2++ is the one-factor Hull-White model with (a, sigma)); the Hull-White bootstrap
    # is checked against QuantLib's AnalyticBSMHullWhiteEngine in test_equity_vol_calibration.py.
    hw = HullWhiteParams(mean_reversion=0.08, volatility=0.012)
    g2 = G2PlusPlusParams(a=0.08, sigma=0.012, b=0.3, eta=1e-9, rho=0.0)
    quotes = [EquityVolQuote(expiry=t, implied_vol=v) for t, v in ((1.0, 0.22), (4.0, 0.2), (10.0, 0.21))]
    one = calibrate_equity_volatility(CURVE, hw, level=S0, dividend_yield=0.0, correlation=rho, quotes=quotes)
    two = calibrate_equity_volatility(CURVE, g2, level=S0, dividend_yield=0.0, correlation=(rho, 0.0), quotes=quotes)
    np.testing.assert_allclose(two.bucket_vols, one.bucket_vols, rtol=1e-12)
    for r1, r2 in zip(one.rows, two.rows, strict=True):
        assert r2.rate_variance == pytest.approx(r1.rate_variance, rel=1e-12)
        assert r2.cross_variance == pytest.approx(r1.cross_variance, rel=1e-12, abs=1e-18)


def test_g2_rate_variance_above_the_market_variance_is_rejected():
    # With the equity uncorrelated with both factors, V_G2(10) alone exceeds 0.025^2 * 10
    # (V_G2 by quadrature, Ito isometry): no equity vol can lower it.
    v = quad(lambda u: SIGMA**2 * _ba(u) ** 2 + ETA**2 * _bb(u) ** 2 + 2 * RHO * SIGMA * ETA * _ba(u) * _bb(u), 0.0,
             10.0)[0]
    assert v > 0.025**2 * 10.0
    with pytest.raises(MarketDataError, match=r"inconsistent with the rate volatility") as err:
        calibrate_equity_volatility(CURVE, G2, level=S0, dividend_yield=0.0, correlation=(0.0, 0.0),
                                    quotes=[EquityVolQuote(expiry=10.0, implied_vol=0.025)])
    message = str(err.value)
    assert "G2++ a 0.5, sigma 0.01, b 0.05, eta 0.008, rho -0.7" in message
    assert "rho_xS 0 and rho_yS 0" in message and "Hull-White" not in message


def test_g2_market_variance_below_the_model_minimum_is_rejected():
    # One bucket: v(s) = s^2 T + 2 s c1 + V with c1 = rx sigma phi2(a; T) + ry eta phi2(b; T)
    # (phi2(k; T) = int_0^T B_k), smallest at s = -c1 / T, where it is V - c1^2 / T (minimum of
    # a quadratic). phi2 and V by quadrature.
    rx, ry, t = -0.6, 0.1, 10.0  # (W1, W2, Z) correlation positive definite with rho = -0.7
    c1 = rx * SIGMA * quad(_ba, 0.0, t)[0] + ry * ETA * quad(_bb, 0.0, t)[0]
    v = quad(lambda u: SIGMA**2 * _ba(u) ** 2 + ETA**2 * _bb(u) ** 2 + 2 * RHO * SIGMA * ETA * _ba(u) * _bb(u), 0.0,
             t)[0]
    floor = v - c1**2 / t
    for factor, ok in ((0.999, False), (1.001, True)):
        quote = EquityVolQuote(expiry=t, implied_vol=math.sqrt(factor * floor / t))
        if ok:
            report = calibrate_equity_volatility(CURVE, G2, level=S0, dividend_yield=0.0,
                                                 correlation=(rx, ry), quotes=[quote])
            assert report.max_abs_vol_error < 1e-10
        else:
            with pytest.raises(MarketDataError, match="inconsistent with the rate volatility"):
                calibrate_equity_volatility(CURVE, G2, level=S0, dividend_yield=0.0,
                                            correlation=(rx, ry), quotes=[quote])


def test_mismatched_rates_and_correlation_are_rejected():
    # Common practice: a clear error for inputs of the wrong form, and for a correlation matrix
    # of (W1, W2, Z) that is not positive definite (no Cholesky factor, so no simulation).
    hw = HullWhiteParams(mean_reversion=0.08, volatility=0.012)
    quotes = [EquityVolQuote(expiry=2.0, implied_vol=0.2)]
    with pytest.raises(ValueError, match=r"pair \(rho_xS, rho_yS\)"):
        calibrate_equity_volatility(CURVE, G2, level=S0, dividend_yield=0.0, correlation=0.3, quotes=quotes)
    with pytest.raises(ValueError, match="one number"):
        calibrate_equity_volatility(CURVE, hw, level=S0, dividend_yield=0.0, correlation=(0.3, 0.1), quotes=quotes)
    with pytest.raises(ValueError, match=r"pair \(rho_xS, rho_yS\)"):
        piecewise_equity_total_variance(G2, VOLS, 0.3, 2.0)
    with pytest.raises(ValueError, match="one number"):
        piecewise_equity_total_variance(hw, VOLS, (0.3, 0.1), 2.0)
    with pytest.raises(ValueError, match="strictly inside"):
        calibrate_equity_volatility(CURVE, G2, level=S0, dividend_yield=0.0, correlation=(1.0, 0.0), quotes=quotes)
    # rho = -0.7 between the factors, the equity +0.9 with both: eigenvalue below zero
    assert np.linalg.eigvalsh(np.array([[1, RHO, 0.9], [RHO, 1, 0.9], [0.9, 0.9, 1]]))[0] < 0
    with pytest.raises(ValueError, match="positive definite"):
        calibrate_equity_volatility(CURVE, G2, level=S0, dividend_yield=0.0, correlation=(0.9, 0.9), quotes=quotes)


# --------------------------------------------------------------------------------------------
# The house view under G2++ (one price of risk on both factor drivers)
# --------------------------------------------------------------------------------------------

LONG_RUN, SPEED, HORIZON, MATURITY = 0.045, 0.3, 8.0, 10.0


def _weights() -> tuple[float, float]:
    """The convention written out: the rates price of risk prices the short-rate shock
    ``(sigma dW1 + eta dW2) / s_r``; Girsanov with correlation R shifts the drivers by
    ``R c / s_r`` times it (c = (sigma, eta))."""
    s_r = math.sqrt(SIGMA**2 + ETA**2 + 2 * RHO * SIGMA * ETA)
    return (SIGMA + RHO * ETA) / s_r, (RHO * SIGMA + ETA) / s_r


def _g2_prices(lam) -> G2PricesOfRisk:
    w_x, w_y = _weights()
    sched = lam if isinstance(lam, PiecewiseConstant) else PiecewiseConstant.constant(lam)
    scaled = [PiecewiseConstant(knots=sched.knots, values=tuple(w * v for v in sched.values)) for w in (w_x, w_y)]
    return G2PricesOfRisk(x=scaled[0], y=scaled[1], equity=0.0)


def test_the_short_rate_shock_carries_the_whole_price_of_risk():
    """With the drivers shifted by w lambda, the short-rate shock's drift moves by lambda and
    the orthogonal shock's not at all; the entropy rate lambda^2 / 2 (the density exponent's
    half squared norm per year, Girsanov) is the Hull-White one (common practice: the
    minimum-entropy split)."""
    from pqflow.measure.prices_of_risk import g2_driver_weights
    from pqflow.simulation.engine import grid_laws

    w = np.array(g2_driver_weights(G2))
    assert w == pytest.approx(_weights(), rel=1e-14)
    corr = np.array([[1.0, RHO], [RHO, 1.0]])
    c = np.array([SIGMA, ETA])
    assert c @ w / math.sqrt(c @ corr @ c) == pytest.approx(1.0, rel=1e-14)  # price of dW_r is lambda
    lam, dt = 0.3, 1e-4
    laws = grid_laws(_model(lam), np.array([0.0, dt]))
    # the equity driver is unpriced here, so the density exponent is the rates' alone
    assert laws.half_sq_cum[1] / dt == pytest.approx(0.5 * lam**2, rel=2e-3)


def _model(lam) -> G2PlusPlusEquityModel:
    return G2PlusPlusEquityModel(
        curve=CURVE, rates=G2,
        equity=G2EquityParams(name="eq", level=S0, dividend_yield=0.0, volatility=0.2,
                              correlation_x=0.25, correlation_y=-0.3),
        prices_of_risk=_g2_prices(lam),
        bond_maturities=(MATURITY,),
    )


def _simulate(lam, seed: int) -> dict[str, np.ndarray]:
    times = np.arange(0.0, HORIZON + 1.0)
    return simulate_batch(_model(lam), times, measure="real_world", n_paths=4000,
                          rng=np.random.default_rng(seed), antithetic=False,
                          columns=["short_rate", f"zcb_{MATURITY:g}y"])


def _within_4_se(sample: np.ndarray, target: float) -> bool:
    se = sample.std(ddof=1) / math.sqrt(sample.size)
    return abs(sample.mean() - target) <= 4.0 * se


def test_g2_short_rate_path_is_met_at_every_month_end_and_by_simulation():
    lam = rates_price_of_risk_for_path(CURVE, G2, long_run_level=LONG_RUN, speed=SPEED, horizon=HORIZON)
    knots = np.arange(int(HORIZON * 12) + 1) / 12.0
    assert lam.knots == tuple(knots[:-1])
    start = today_value(CURVE, G2, target="short_rate", maturity=None)
    # phi(0) = f(0, 0) (B_a(0) = B_b(0) = 0; Brigo and Mercurio 2006, ch. 4.2)
    assert start == pytest.approx(float(CURVE.forward(0.0)), rel=1e-14)
    path = target_path(start, LONG_RUN, SPEED, knots)
    # Reference: the G2++ closed-form real-world mean with lambda_x = lambda_y = lambda.
    ref = g2pp_equity.expected_short_rate(CURVE, G2, _g2_prices(lam), knots,
                                          measure="real_world")
    assert np.max(np.abs(ref - path)) < 1e-12
    # The functions the calibration reports with agree with that reference.
    ours = expected_short_rate(CURVE, G2, PricesOfRisk(rates=lam), knots, measure="real_world")
    np.testing.assert_allclose(ours, ref, rtol=1e-13, atol=1e-16)
    mean = real_world_factor_mean(G2, lam, knots)  # the pair (E x, E y); each checked in the next test
    np.testing.assert_allclose(mean[0] + mean[1], ref - phi(CURVE, G2, knots), rtol=1e-12, atol=1e-16)
    assert np.max(np.abs(model_target_value(CURVE, G2, knots, mean, target="short_rate", maturity=None) - path)) < 1e-12
    # Reference: Monte Carlo of the G2++ model under the real-world measure, 4 SE.
    out = _simulate(lam, seed=20250101)
    for k in (2, 5, 8):
        assert _within_4_se(out["short_rate"][:, k], float(target_path(start, LONG_RUN, SPEED, k)))


def test_g2_zero_yield_path_is_met_at_every_month_end_and_by_simulation():
    lam = rates_price_of_risk_for_path(CURVE, G2, long_run_level=LONG_RUN, speed=SPEED, horizon=HORIZON,
                                       target="zero_yield", maturity=MATURITY)
    knots = np.arange(int(HORIZON * 12) + 1) / 12.0
    start = today_value(CURVE, G2, target="zero_yield", maturity=MATURITY)
    # today's 10-year zero yield is the curve's own: -ln P(0, M) / M
    assert start == pytest.approx(-math.log(float(CURVE.discount(MATURITY))) / MATURITY, rel=1e-13)
    path = target_path(start, LONG_RUN, SPEED, knots)
    # Reference: E_P of the affine yield -ln P(t, t+M) / M at the closed-form factor means
    # (linear in (x, y); P(t, t+M) from pqflow.models.g2pp.zcb_price, Brigo and Mercurio 2006,
    # eq. 4.14, number from memory).
    mx, my = g2pp_equity.real_world_factor_means(G2, _g2_prices(lam), knots)
    ref = -np.log(zcb_price(CURVE, G2, knots, MATURITY, mx, my)) / MATURITY
    assert np.max(np.abs(ref - path)) < 1e-12
    mean = real_world_factor_mean(G2, lam, knots)
    np.testing.assert_allclose(mean[0], mx, rtol=1e-12, atol=1e-16)
    np.testing.assert_allclose(mean[1], my, rtol=1e-12, atol=1e-16)
    ours = model_target_value(CURVE, G2, knots, mean, target="zero_yield", maturity=MATURITY)
    assert np.max(np.abs(ours - path)) < 1e-12
    zeros = np.zeros_like(knots)  # market consistent: the forward yield, -ln(P(0,t+M)/P(0,t))/M + convexity
    q_yield = model_target_value(CURVE, G2, knots, (zeros, zeros), target="zero_yield", maturity=MATURITY)
    np.testing.assert_allclose(q_yield, -np.log(zcb_price(CURVE, G2, knots, MATURITY, 0.0, 0.0)) / MATURITY, rtol=1e-14)
    # Reference: Monte Carlo, the simulated 10-year bond column, 4 SE.
    out = _simulate(lam, seed=20250202)
    y = -np.log(out[f"zcb_{MATURITY:g}y"]) / MATURITY
    for k in (2, 5, 8):
        assert _within_4_se(y[:, k], float(target_path(start, LONG_RUN, SPEED, k)))


def test_g2_constant_price_of_risk_meets_the_short_rate_target():
    target, year = 0.045, 5.0
    lam = rates_price_of_risk_for_target(CURVE, G2, target_short_rate=target, target_time=year)
    # Reference: the G2++ closed-form real-world mean with lambda_x = lambda_y = lambda.
    ref = float(g2pp_equity.expected_short_rate(CURVE, G2, _g2_prices(lam), year,
                                                measure="real_world"))
    assert ref == pytest.approx(target, abs=1e-14)
    # Reference: Monte Carlo at the target year, 4 SE; and under Q, reweighted by the density
    # dQ/dP, the same paths give E_Q[r_t] = phi(t) (Girsanov; common practice check).
    out = _simulate(lam, seed=20250303)
    r = out["short_rate"][:, int(year)]
    assert _within_4_se(r, target)
    q_mean = float(expected_short_rate(CURVE, G2, PricesOfRisk(rates=lam), year,
                                       measure="market_consistent"))
    assert _within_4_se(out["q_density"][:, int(year)] * r, q_mean)


def test_g2_house_view_input_errors():
    # Common practice: clear errors for a factor mean of the wrong form and an unknown target.
    t = np.array([1.0, 2.0])
    with pytest.raises(ValueError, match=r"pair \(E x_t, E y_t\)"):
        model_target_value(CURVE, G2, t, np.zeros(2), target="short_rate", maturity=None)
    with pytest.raises(ValueError, match="unknown target"):
        rates_price_of_risk_for_path(CURVE, G2, long_run_level=0.04, speed=0.3, horizon=2.0, target="swap_rate")
    with pytest.raises(ValueError, match="positive maturity"):
        rates_price_of_risk_for_path(CURVE, G2, long_run_level=0.04, speed=0.3, horizon=2.0, target="zero_yield")
