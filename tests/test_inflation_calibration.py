"""The real curve from ZC inflation swaps and the Jarrow-Yildirim fit to YoY cap/floor quotes.

Calibration targets come from outside the code under test: ZCIIS quotes are invented rates;
YoY cap and floor prices are built here from an independent derivation of the Jarrow-Yildirim
caplet (Jarrow and Yildirim, *J. Financial and Quantitative Analysis* 38, 2003; Brigo and
Mercurio, *Interest Rate Models - Theory and Practice*, 2nd ed., 2006, ch. 15.2, from memory):
the forward ``1 + F = P_n(0,S) P_r(0,T) / (P_n(0,T) P_r(0,S)) e^C`` with ``C`` in Brigo and
Mercurio's printed form, the variance of ``ln(I_T / I_S)`` by ``scipy.integrate.quad`` of the
driver loadings (Ito isometry), and the price by QuantLib's ``blackFormula`` with displacement 1
(what QuantLib's YoY unit-displaced Black cap/floor engine computes per caplet). Flat vols are
inverted with QuantLib's ``bachelierBlackFormula`` and ``scipy.optimize.brentq``.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
import QuantLib as ql
from scipy.integrate import quad
from scipy.optimize import brentq

from pqflow.calibration.inflation import (
    YoYCapFloorQuote,
    ZeroCouponInflationSwapQuote,
    calibrate_jarrow_yildirim,
    real_curve_from_zc_inflation_swaps,
    yoy_quote_price,
)
from pqflow.errors import CalibrationError, MarketDataError
from pqflow.market.curve import LogDiscountCurve
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.jarrow_yildirim import JarrowYildirimParams

__all__: list[str] = []

PILLARS = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0])
NOMINAL = LogDiscountCurve.from_zero_rates(
    PILLARS, np.array([0.021, 0.022, 0.024, 0.025, 0.027, 0.028, 0.030, 0.031, 0.031, 0.030])
)
ZC_MATURITIES = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 10.0, 12.0, 15.0, 20.0, 30.0])
ZC_RATES = np.array([0.028, 0.026, 0.0245, 0.024, 0.0235, 0.0232, 0.023, 0.0229, 0.0228,
                     0.0229, 0.023, 0.0232, 0.0235])  # invented ZCIIS quotes (decimals)
TRUE = JarrowYildirimParams(
    nominal=HullWhiteParams(mean_reversion=0.05, volatility=0.009),
    real=HullWhiteParams(mean_reversion=0.3, volatility=0.006),
    inflation_volatility=0.011,
    correlation_nominal_real=0.6,
    correlation_nominal_inflation=0.2,
    correlation_real_inflation=-0.25,
)


def _zc_quotes() -> list[ZeroCouponInflationSwapQuote]:
    return [ZeroCouponInflationSwapQuote(maturity=float(t), rate=float(k))
            for t, k in zip(ZC_MATURITIES, ZC_RATES, strict=True)]


REAL = real_curve_from_zc_inflation_swaps(NOMINAL, _zc_quotes()).curve


# --------------------------------------------------------------------------------------------
# The real curve
# --------------------------------------------------------------------------------------------


def test_real_curve_reprices_every_zciis_quote_exactly():
    fit = real_curve_from_zc_inflation_swaps(NOMINAL, _zc_quotes())
    # Reference: at a fair ZCIIS rate k the fixed leg P_n(0,T) ((1 + k)^T - 1) equals the index
    # leg P_r(0,T) - P_n(0,T), model independent (Brigo and Mercurio 2006, ch. 15.2; common
    # practice), so P_r(0,T) = P_n(0,T) (1 + k)^T at each quoted maturity.
    for t, k, row in zip(ZC_MATURITIES, ZC_RATES, fit.rows, strict=True):
        p_n, p_r = float(NOMINAL.discount(t)), float(fit.curve.discount(t))
        fixed_leg = p_n * ((1.0 + k) ** t - 1.0)
        assert math.isclose(p_r - p_n, fixed_leg, rel_tol=1e-11, abs_tol=1e-15)
        assert row.maturity == t and row.market_rate == k
        assert math.isclose(row.model_rate, k, rel_tol=0.0, abs_tol=1e-13)
        assert row.real_discount_factor == pytest.approx(p_n * (1.0 + k) ** t, rel=1e-13)
    assert fit.max_abs_difference_bp < 1e-9
    assert len(fit.as_records()) == len(ZC_MATURITIES)
    with pytest.raises(dataclasses.FrozenInstanceError):
        fit.max_abs_difference_bp = 0.0  # type: ignore[misc]


def test_real_curve_rejects_bad_quotes_clearly():
    q = _zc_quotes()
    with pytest.raises(MarketDataError, match="strictly increasing"):
        real_curve_from_zc_inflation_swaps(NOMINAL, [q[1], q[0]])
    with pytest.raises(MarketDataError, match="nominal curve ends at 30"):
        real_curve_from_zc_inflation_swaps(NOMINAL, [ZeroCouponInflationSwapQuote(maturity=40.0, rate=0.02)])
    with pytest.raises(MarketDataError, match="decimals"):
        ZeroCouponInflationSwapQuote(maturity=5.0, rate=2.5)
    with pytest.raises(MarketDataError, match="positive"):
        ZeroCouponInflationSwapQuote(maturity=0.0, rate=0.02)
    with pytest.raises(MarketDataError, match="no ZC inflation swap quotes"):
        real_curve_from_zc_inflation_swaps(NOMINAL, [])


# --------------------------------------------------------------------------------------------
# Independent reference prices of YoY caplets
# --------------------------------------------------------------------------------------------


def _b(a: float, u: float) -> float:
    return -math.expm1(-a * u) / a


def _reference_forward(p: JarrowYildirimParams, s: float, e: float) -> float:
    """F(S,T) = P_n(0,S) P_r(0,T) / (P_n(0,T) P_r(0,S)) e^C - 1 with C(S,T) as printed by
    Brigo and Mercurio 2006, ch. 15.2 (from memory)."""
    an, sn, ar, sr = p.nominal.mean_reversion, p.nominal.volatility, p.real.mean_reversion, p.real.volatility
    c = sr * _b(ar, e - s) * (
        _b(ar, s) * (p.correlation_real_inflation * p.inflation_volatility - 0.5 * sr * _b(ar, s)
                     + p.correlation_nominal_real * sn / (an + ar) * (1.0 + ar * _b(an, s)))
        - p.correlation_nominal_real * sn / (an + ar) * _b(an, s)
    )
    ratio = float(NOMINAL.discount(s) * REAL.discount(e) / (NOMINAL.discount(e) * REAL.discount(s)))
    return ratio * math.exp(c) - 1.0


def _reference_variance(p: JarrowYildirimParams, s: float, e: float) -> float:
    """Var ln(I_T/I_S) by quad of the loadings on (W_n, W_r, W_I) (Ito isometry)."""
    an, sn, ar, sr = p.nominal.mean_reversion, p.nominal.volatility, p.real.mean_reversion, p.real.volatility
    corr = p.driver_correlation()
    tau = e - s
    g0 = lambda u: np.array([  # noqa: E731
        _b(an, tau) * sn * math.exp(-an * (s - u)), -_b(ar, tau) * sr * math.exp(-ar * (s - u)), 0.0])
    g1 = lambda u: np.array([sn * _b(an, e - u), -sr * _b(ar, e - u), p.inflation_volatility])  # noqa: E731
    v = quad(lambda u: float(g1(u) @ corr @ g1(u)), s, e, epsabs=0.0, epsrel=1e-13)[0]
    if s > 0.0:
        v += quad(lambda u: float(g0(u) @ corr @ g0(u)), 0.0, s, epsabs=0.0, epsrel=1e-13)[0]
    return v


def _reference_cap(p: JarrowYildirimParams, maturity: int, strike: float, kind: str) -> float:
    """Sum of annual caplets: QuantLib blackFormula(type, K, F, sd, P_n(0,T), displacement=1)."""
    ql_type = ql.Option.Call if kind == "cap" else ql.Option.Put
    total = 0.0
    for i in range(1, maturity + 1):
        f = _reference_forward(p, i - 1.0, float(i))
        sd = math.sqrt(_reference_variance(p, i - 1.0, float(i)))
        total += ql.blackFormula(ql_type, strike, f, sd, float(NOMINAL.discount(i)), 1.0)
    return total


def _price_quotes(p: JarrowYildirimParams, grid) -> list[YoYCapFloorQuote]:
    return [YoYCapFloorQuote(maturity=float(n), strike=k, kind=kind, price=_reference_cap(p, n, k, kind))
            for n, k, kind in grid]


START = dataclasses.replace(TRUE, inflation_volatility=0.02,
                            real=HullWhiteParams(mean_reversion=0.15, volatility=0.01))


def test_fit_of_the_inflation_volatility_recovers_it():
    grid = [(n, k, "cap") for n in (1, 3, 5, 10) for k in (0.02, 0.03)]
    grid += [(5, 0.01, "floor"), (10, 0.0, "floor")]
    quotes = _price_quotes(TRUE, grid)
    initial = dataclasses.replace(TRUE, inflation_volatility=0.02)
    report = calibrate_jarrow_yildirim(NOMINAL, REAL, quotes, initial=initial)
    # Reference: the sigma_I that generated the independent reference prices above.
    assert report.success and report.fitted == ("inflation_volatility",) and report.at_bound == ()
    assert report.params.inflation_volatility == pytest.approx(TRUE.inflation_volatility, rel=1e-8)
    assert report.params.real == TRUE.real and report.params.nominal == TRUE.nominal
    assert report.price_rmse_bp < 1e-6 and report.vol_rmse_bp is None
    for row, q in zip(report.rows, quotes, strict=True):
        assert row.market_price == q.price and row.model_price == pytest.approx(q.price, rel=1e-8)
        assert row.model_vol is None and row.vol_difference_bp is None
    assert len(report.as_records()) == len(quotes)
    with pytest.raises(dataclasses.FrozenInstanceError):
        report.price_rmse_bp = 0.0  # type: ignore[misc]


def test_joint_fit_of_inflation_and_real_rate_volatilities_recovers_them():
    strikes = ((0.0, "floor"), (0.025, "cap"), (0.04, "cap"))
    grid = [(n, k, kind) for n in (1, 2, 4, 7, 10, 15) for k, kind in strikes]
    quotes = _price_quotes(TRUE, grid)
    report = calibrate_jarrow_yildirim(
        NOMINAL, REAL, quotes, initial=START,
        fit=("inflation_volatility", "real_mean_reversion", "real_volatility"),
    )
    # Reference: the generating parameters (prices above); the quotes span expiries and
    # strikes, so the three volatility parameters are identified.
    assert report.success and report.at_bound == ()
    assert report.params.inflation_volatility == pytest.approx(TRUE.inflation_volatility, rel=1e-6)
    assert report.params.real.mean_reversion == pytest.approx(TRUE.real.mean_reversion, rel=1e-5)
    assert report.params.real.volatility == pytest.approx(TRUE.real.volatility, rel=1e-5)
    assert report.price_rmse_bp < 1e-5


def _flat_normal_vol(maturity: int, strike: float, price: float, forwards: list[float]) -> float:
    """Flat Bachelier vol (bp) of a YoY cap on the given forwards: QuantLib
    bachelierBlackFormula per caplet (stdDev = vol sqrt(i), discount P_n(0,i)), root by brentq."""
    def cap(vol: float) -> float:
        return sum(ql.bachelierBlackFormula(ql.Option.Call, strike, f, vol * math.sqrt(i),
                                            float(NOMINAL.discount(i)))
                   for i, f in zip(range(1, maturity + 1), forwards, strict=True))
    return brentq(lambda v: cap(v) - price, 1e-8, 0.1, xtol=1e-16, rtol=1e-14) * 1e4


def test_fit_to_flat_normal_vol_quotes_on_market_forwards():
    quotes, prices = [], []
    for n, k in [(2, 0.02), (5, 0.025), (8, 0.03), (12, 0.02)]:
        fwds = [_reference_forward(TRUE, i - 1.0, float(i)) for i in range(1, n + 1)]
        price = _reference_cap(TRUE, n, k, "cap")
        vol = _flat_normal_vol(n, k, price, fwds)
        quotes.append(YoYCapFloorQuote(maturity=float(n), strike=k, kind="cap", vol=vol,
                                       convention="normal", forwards=tuple(fwds)))
        prices.append(price)
    # The quote's price is its flat vol on its forwards (QuantLib Bachelier, as inverted above).
    for q, p in zip(quotes, prices, strict=True):
        assert yoy_quote_price(NOMINAL, q) == pytest.approx(p, rel=1e-10)
    initial = dataclasses.replace(TRUE, inflation_volatility=0.005)
    report = calibrate_jarrow_yildirim(NOMINAL, REAL, quotes, initial=initial)
    # Reference: the generating sigma_I; the model's flat vols on the market forwards match.
    assert report.params.inflation_volatility == pytest.approx(TRUE.inflation_volatility, rel=1e-8)
    assert report.vol_rmse_bp is not None and report.vol_rmse_bp < 1e-5
    for row, q in zip(report.rows, quotes, strict=True):
        assert row.convention == "normal" and row.market_vol == q.vol
        assert row.model_vol == pytest.approx(q.vol, rel=1e-8)


def test_zero_weight_quote_is_ignored():
    quotes = _price_quotes(TRUE, [(3, 0.02, "cap"), (6, 0.025, "cap"), (9, 0.01, "floor")])
    # Common practice of weighted least squares: a quote with weight 0 does not move the fit.
    outlier = YoYCapFloorQuote(maturity=4.0, strike=0.02, kind="cap", price=0.05, weight=0.0)
    initial = dataclasses.replace(TRUE, inflation_volatility=0.02)
    report = calibrate_jarrow_yildirim(NOMINAL, REAL, quotes + [outlier], initial=initial)
    assert report.params.inflation_volatility == pytest.approx(TRUE.inflation_volatility, rel=1e-8)
    assert report.rows[-1].price_difference_bp < -100.0  # reported, but not fitted


def test_bad_quotes_and_requests_are_rejected_clearly():
    with pytest.raises(MarketDataError, match="exactly one of price and vol"):
        YoYCapFloorQuote(maturity=2.0, strike=0.02, kind="cap")
    with pytest.raises(MarketDataError, match="whole number of years"):
        YoYCapFloorQuote(maturity=2.5, strike=0.02, kind="cap", price=0.01)
    with pytest.raises(MarketDataError, match="kind must be"):
        YoYCapFloorQuote(maturity=2.0, strike=0.02, kind="collar", price=0.01)
    with pytest.raises(MarketDataError, match="2 YoY forward rates"):
        YoYCapFloorQuote(maturity=2.0, strike=0.02, kind="cap", vol=80.0, convention="normal",
                         forwards=(0.02,))
    with pytest.raises(MarketDataError, match="basis points"):
        YoYCapFloorQuote(maturity=1.0, strike=0.02, kind="cap", vol=0.008, convention="normal",
                         forwards=(0.02,))
    ok = YoYCapFloorQuote(maturity=40.0, strike=0.02, kind="cap", price=0.1)
    with pytest.raises(CalibrationError, match="reach 30"):
        calibrate_jarrow_yildirim(NOMINAL, REAL, [ok], initial=TRUE)
    with pytest.raises(ValueError, match="fit must name"):
        calibrate_jarrow_yildirim(NOMINAL, REAL, _price_quotes(TRUE, [(2, 0.02, "cap")]), initial=TRUE,
                                  fit=("correlation_real_inflation",))
    with pytest.raises(CalibrationError, match="no YoY"):
        calibrate_jarrow_yildirim(NOMINAL, REAL, [], initial=TRUE)
