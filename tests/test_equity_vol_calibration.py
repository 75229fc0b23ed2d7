"""Piecewise-constant equity volatility under Hull-White rates: variance, prices, bootstrap."""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql
from scipy.integrate import quad

from pqflow.calibration.equity_vol import (
    EquityVolQuote,
    PiecewiseEquityVolatility,
    calibrate_equity_volatility,
    equity_option_price_piecewise,
    piecewise_equity_total_variance,
)
from pqflow.errors import MarketDataError
from pqflow.market.curve import LogDiscountCurve
from pqflow.models.hull_white import HullWhiteParams

TODAY = ql.Date(15, 1, 2025)
DC = ql.Actual365Fixed()
PILLARS = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0])
CURVE = LogDiscountCurve.from_zero_rates(
    PILLARS, np.array([0.021, 0.022, 0.024, 0.025, 0.027, 0.028, 0.030, 0.031, 0.031])
)
RATES = HullWhiteParams(mean_reversion=0.08, volatility=0.012)
VOLS = PiecewiseEquityVolatility(
    bucket_ends=np.array([1.0, 3.0, 7.0]), volatilities=np.array([0.24, 0.17, 0.21])
)


def _variance_by_quadrature(rates, vol, rho, expiry):
    """int_0^T [s(u)^2 + 2 rho sigma s(u) B(T-u) + sigma^2 B(T-u)^2] du by scipy quad: the
    variance of ln(S_T / P(T,T)) under the T-forward measure (the Ito derivation in the module
    docstring, from dP/P = r dt - sigma B(T-t) dW: Brigo and Mercurio 2006, ch. 3.3)."""
    a, sig = rates.mean_reversion, rates.volatility

    def integrand(u):
        b = (1.0 - math.exp(-a * (expiry - u))) / a
        s = float(vol(u))
        return s * s + 2.0 * rho * sig * s * b + sig * sig * b * b

    breaks = [e for e in vol.bucket_ends if e < expiry]
    value, _ = quad(integrand, 0.0, expiry, points=breaks or None, epsabs=1e-14, epsrel=1e-13,
                    limit=200)
    return value


def _date(t: float) -> ql.Date:
    # a QuantLib convention: dates from day counts so Actual365Fixed year fractions are exact.
    return TODAY + int(round(t * 365))


def _ql_handle(times):
    ts = np.unique(np.concatenate(([0.0], times, [CURVE.max_maturity])))
    dfs = [1.0] + [float(CURVE.discount(t)) for t in ts[1:]]
    return ql.YieldTermStructureHandle(ql.DiscountCurve([_date(t) for t in ts], dfs, DC))


def _ql_option(*, level, q, vol, expiry, strike, kind, rates=None, rho=0.0):
    """QuantLib price: AnalyticBSMHullWhiteEngine with ``rates``, else AnalyticEuropeanEngine
    (deterministic rates). The engine's correlation is equity vs short-rate shocks, as ours."""
    ql.Settings.instance().evaluationDate = TODAY
    rf = _ql_handle(np.array([expiry]))
    div = ql.YieldTermStructureHandle(ql.FlatForward(TODAY, q, DC))
    black = ql.BlackVolTermStructureHandle(ql.BlackConstantVol(TODAY, ql.NullCalendar(), vol, DC))
    process = ql.BlackScholesMertonProcess(ql.QuoteHandle(ql.SimpleQuote(level)), div, rf, black)
    payoff = ql.PlainVanillaPayoff(ql.Option.Call if kind == "call" else ql.Option.Put, strike)
    option = ql.VanillaOption(payoff, ql.EuropeanExercise(_date(expiry)))
    if rates is None:
        option.setPricingEngine(ql.AnalyticEuropeanEngine(process))
    else:
        model = ql.HullWhite(rf, rates.mean_reversion, rates.volatility)
        option.setPricingEngine(ql.AnalyticBSMHullWhiteEngine(rho, process, model))
    return option.NPV()


@pytest.mark.parametrize("rho", [-0.4, 0.0, 0.35])
@pytest.mark.parametrize("expiry", [0.5, 1.0, 2.0, 3.0, 5.5, 7.0, 12.0])
def test_total_variance_matches_quadrature(rho, expiry):
    ours = float(piecewise_equity_total_variance(RATES, VOLS, rho, expiry))
    # Reference: scipy.integrate.quad of the variance rate (12y lies beyond the last bucket,
    # where the last vol continues).
    assert ours == pytest.approx(_variance_by_quadrature(RATES, VOLS, rho, expiry), rel=1e-11)


def test_total_variance_is_vectorised_over_expiries():
    t = np.array([[0.5, 2.0], [5.0, 9.0]])  # shape (2, 2)
    out = piecewise_equity_total_variance(RATES, VOLS, 0.2, t)
    assert out.shape == (2, 2)
    for idx in np.ndindex(t.shape):
        # Reference: scipy.integrate.quad, as above.
        assert out[idx] == pytest.approx(_variance_by_quadrature(RATES, VOLS, 0.2, t[idx]),
                                         rel=1e-11)


@pytest.mark.parametrize("rho", [-0.3, 0.4])
@pytest.mark.parametrize("expiry", [1.0, 5.0])
@pytest.mark.parametrize("strike", [80.0, 100.0, 125.0])
@pytest.mark.parametrize("kind", ["call", "put"])
def test_constant_vol_price_matches_quantlib_bsm_hull_white(rho, expiry, strike, kind):
    vol = PiecewiseEquityVolatility(bucket_ends=np.array([2.0, 6.0]),
                                    volatilities=np.array([0.2, 0.2]))
    ours = float(equity_option_price_piecewise(
        CURVE, RATES, level=100.0, dividend_yield=0.015, correlation=rho, volatility=vol,
        expiry=expiry, strike=strike, kind=kind,
    ))
    # Reference: QuantLib AnalyticBSMHullWhiteEngine (constant equity vol).
    ref = _ql_option(level=100.0, q=0.015, vol=0.2, expiry=expiry, strike=strike, kind=kind,
                     rates=RATES, rho=rho)
    assert ours == pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize("rho", [-0.5, 0.0, 0.3])
def test_bootstrap_recovers_known_piecewise_vols(rho):
    # Quotes from the quadrature variance: sigma_imp(T) = sqrt(v(T) / T).
    expiries = VOLS.bucket_ends
    quotes = [
        EquityVolQuote(expiry=float(t),
                       implied_vol=math.sqrt(_variance_by_quadrature(RATES, VOLS, rho, t) / t))
        for t in expiries[::-1]  # any order is accepted
    ]
    report = calibrate_equity_volatility(
        CURVE, RATES, level=100.0, dividend_yield=0.02, correlation=rho, quotes=quotes
    )
    # Reference: the generating vols (the quotes came from scipy quadrature, not our closed form).
    np.testing.assert_allclose(report.bucket_ends, expiries)
    np.testing.assert_allclose(report.bucket_vols, VOLS.volatilities, rtol=1e-9)
    assert report.max_abs_vol_error < 1e-10
    for row in report.rows:
        assert row.model_price == pytest.approx(row.market_price, rel=1e-10)
        total = row.equity_variance + row.cross_variance + row.rate_variance
        assert total == pytest.approx(row.market_vol**2 * row.expiry, rel=1e-10)


def test_single_bucket_with_tiny_rate_vol_is_black_scholes():
    # Hull, Options, Futures and Other Derivatives (standard worked example): S = 42, K = 40,
    # r = 10%, sigma = 20%, T = 0.5 gives call 4.7594 and put 0.8086 (4 decimals).
    curve = LogDiscountCurve.from_zero_rates(np.array([0.25, 0.5, 1.0]), np.full(3, 0.10))
    tiny = HullWhiteParams(mean_reversion=0.1, volatility=1e-9)
    report = calibrate_equity_volatility(
        curve, tiny, level=42.0, dividend_yield=0.0, correlation=0.5,
        quotes=[EquityVolQuote(expiry=0.5, implied_vol=0.20, strike=40.0)],
    )
    assert report.bucket_vols[0] == pytest.approx(0.20, rel=1e-7)
    call = float(equity_option_price_piecewise(
        curve, tiny, level=42.0, dividend_yield=0.0, correlation=0.5,
        volatility=report.volatility, expiry=0.5, strike=40.0, kind="call",
    ))
    put = float(equity_option_price_piecewise(
        curve, tiny, level=42.0, dividend_yield=0.0, correlation=0.5,
        volatility=report.volatility, expiry=0.5, strike=40.0, kind="put",
    ))
    assert call == pytest.approx(4.7594, abs=5e-5)
    assert put == pytest.approx(0.8086, abs=5e-5)


@pytest.mark.parametrize("rho", [-0.6, 0.25])
def test_bootstrapped_vol_reprices_the_quote_in_quantlib(rho):
    # One quote with real rate volatility: QuantLib's BSM-Hull-White engine at the fitted
    # sigma_S must give the deterministic-rate Black-Scholes price at the quoted vol, for an
    # at-the-money-spot strike as well as the default at-the-money-forward one.
    rates = HullWhiteParams(mean_reversion=0.05, volatility=0.01)
    fwd = 100.0 * math.exp(-0.01 * 5.0) / float(CURVE.discount(5.0))
    for strike in (None, 100.0):
        quote = EquityVolQuote(expiry=5.0, implied_vol=0.22, strike=strike)
        report = calibrate_equity_volatility(
            CURVE, rates, level=100.0, dividend_yield=0.01, correlation=rho, quotes=[quote]
        )
        row = report.rows[0]
        k = row.strike
        sigma_s = float(report.bucket_vols[0])
        for kind in ("call", "put"):
            # Reference: QuantLib AnalyticBSMHullWhiteEngine at sigma_S vs QuantLib
            # AnalyticEuropeanEngine (deterministic rates) at the quoted vol.
            model = _ql_option(level=100.0, q=0.01, vol=sigma_s, expiry=5.0, strike=k,
                               kind=kind, rates=rates, rho=rho)
            market = _ql_option(level=100.0, q=0.01, vol=0.22, expiry=5.0, strike=k, kind=kind)
            assert model == pytest.approx(market, rel=1e-10)
        # the reported market price is the out-of-the-money option's (a call at the money)
        assert row.market_price == pytest.approx(
            _ql_option(level=100.0, q=0.01, vol=0.22, expiry=5.0, strike=k,
                       kind="call" if k >= fwd * (1 - 1e-12) else "put"), rel=1e-10)
        assert abs(row.vol_error) < 1e-10
        if strike is None:  # default strike: the forward S0 e^{-qT} / P(0, T)
            assert k == pytest.approx(fwd, rel=1e-14)


def test_rate_variance_above_market_variance_is_rejected():
    # With rho = 0 the rate term V(T) alone exceeds sigma_imp^2 T: no equity vol can lower it.
    rates = HullWhiteParams(mean_reversion=0.01, volatility=0.02)
    with pytest.raises(MarketDataError, match="inconsistent with the rate volatility"):
        calibrate_equity_volatility(
            CURVE, rates, level=100.0, dividend_yield=0.0, correlation=0.0,
            quotes=[EquityVolQuote(expiry=10.0, implied_vol=0.05)],
        )


def test_market_variance_below_the_model_minimum_is_rejected():
    # With rho < 0 the model variance s^2 T + 2 rho sigma s phi2(T) + V(T) is smallest at
    # s = -rho sigma phi2 / T, where it is V - (rho sigma phi2)^2 / T (minimum of a quadratic);
    # a market variance just below that has no solution. phi2 by quadrature of B.
    rates = HullWhiteParams(mean_reversion=0.05, volatility=0.015)
    rho, t = -0.9, 10.0
    a, sig = rates.mean_reversion, rates.volatility
    phi2 = quad(lambda u: (1.0 - math.exp(-a * u)) / a, 0.0, t)[0]
    v = quad(lambda u: (sig * (1.0 - math.exp(-a * u)) / a) ** 2, 0.0, t)[0]
    floor = v - (rho * sig * phi2) ** 2 / t
    for factor, ok in ((0.999, False), (1.001, True)):
        quote = EquityVolQuote(expiry=t, implied_vol=math.sqrt(factor * floor / t))
        if ok:
            report = calibrate_equity_volatility(
                CURVE, rates, level=100.0, dividend_yield=0.0, correlation=rho, quotes=[quote]
            )
            assert report.max_abs_vol_error < 1e-10
        else:
            with pytest.raises(MarketDataError, match="inconsistent with the rate volatility"):
                calibrate_equity_volatility(
                    CURVE, rates, level=100.0, dividend_yield=0.0, correlation=rho,
                    quotes=[quote],
                )


def test_decreasing_total_variance_is_rejected_at_its_bucket():
    # Common practice (no calendar arbitrage): total implied variance cannot fall with maturity.
    quotes = [EquityVolQuote(expiry=1.0, implied_vol=0.30),
              EquityVolQuote(expiry=2.0, implied_vol=0.15)]
    with pytest.raises(MarketDataError, match=r"on \(1, 2\]"):
        calibrate_equity_volatility(
            CURVE, RATES, level=100.0, dividend_yield=0.0, correlation=0.0, quotes=quotes
        )
    with pytest.raises(MarketDataError, match="distinct expiries"):
        calibrate_equity_volatility(
            CURVE, RATES, level=100.0, dividend_yield=0.0, correlation=0.0,
            quotes=[quotes[0], EquityVolQuote(expiry=1.0, implied_vol=0.25)],
        )
    with pytest.raises(MarketDataError, match="decimal"):
        EquityVolQuote(expiry=1.0, implied_vol=-0.2)
