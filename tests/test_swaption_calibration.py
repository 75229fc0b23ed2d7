"""Hull-White swaptions (Jamshidian) against QuantLib, and the fit of (a, sigma) to quotes."""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql

from pqflow.calibration.swaptions import (
    SwaptionQuote,
    calibrate_hull_white_to_swaptions,
    fixed_leg_schedule,
    forward_swap_rate,
    hull_white_swaption_price,
    jamshidian_decomposition,
    swap_annuity,
    swaption_quote_price,
)
from pqflow.errors import MarketDataError
from pqflow.market.curve import LogDiscountCurve
from pqflow.models.hull_white import HullWhiteParams, alpha, b_factor

TODAY = ql.Date(15, 1, 2025)
DC = ql.Actual365Fixed()
PILLARS = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0])
SLOPED = LogDiscountCurve.from_zero_rates(
    PILLARS, np.array([0.021, 0.022, 0.024, 0.025, 0.027, 0.028, 0.030, 0.031, 0.031, 0.030])
)
FLAT = LogDiscountCurve.from_zero_rates(PILLARS, np.full(PILLARS.size, 0.03))


def _date(t: float) -> ql.Date:
    # a QuantLib convention: dates from day counts so Actual365Fixed year fractions are exact.
    return TODAY + int(round(t * 365))


def _month_date(t: float) -> ql.Date:
    # Whole months from the 15th: 30/360 year fractions are exact multiples of 1/12.
    return TODAY + ql.Period(int(round(t * 12)), ql.Months)


THIRTY360 = ql.Thirty360(ql.Thirty360.BondBasis)


def _ql_curve(curve, times, date=_date, dc=DC) -> ql.YieldTermStructureHandle:
    """QuantLib discount curve through our discount factors at ``times`` (plus today as the
    first node). Jamshidian's price depends on the curve only through P(0, T0) and P(0, Ti)."""
    ts = np.unique(np.concatenate(([0.0], times, [curve.max_maturity])))
    dates = [date(t) for t in ts]
    dfs = [1.0] + [float(curve.discount(t)) for t in ts[1:]]
    return ql.YieldTermStructureHandle(ql.DiscountCurve(dates, dfs, dc))


def _ql_root_tolerance(curve, expiry, tenor, a):
    """Absolute price error allowed by QuantLib's Jamshidian root tolerance (1e-8 on r*):
    a root error d moves each bond strike X_i by -B(T_i - T0) X_i d and each zero-bond put by at
    most P(0, T0) times that; with sum c_i X_i = 1 the price moves by at most
    d P(0, T0) B(Tn - T0)."""
    return 1e-8 * float(curve.discount(expiry)) * float(b_factor(a, tenor))


def _ql_swaption(curve, params, *, expiry, tenor, strike, kind, frequency=1):
    """QuantLib Jamshidian price. Annual legs use Actual365Fixed with day-count dates; other
    frequencies use 30/360 with month dates (for exact fractions), on both curve and leg."""
    ql.Settings.instance().evaluationDate = TODAY
    date, dc = (_date, DC) if frequency == 1 else (_month_date, THIRTY360)
    times, _ = fixed_leg_schedule(expiry, tenor, frequency=frequency)
    handle = _ql_curve(curve, np.concatenate(([expiry], times)), date, dc)
    schedule = ql.Schedule([date(expiry)] + [date(t) for t in times])
    index = ql.IborIndex("pq", ql.Period(12 // frequency, ql.Months), 0, ql.EURCurrency(),
                         ql.NullCalendar(), ql.Unadjusted, False, dc, handle)
    swap_type = ql.Swap.Payer if kind == "payer" else ql.Swap.Receiver
    swap = ql.VanillaSwap(swap_type, 1.0, schedule, strike, dc, schedule, index, 0.0, dc)
    swaption = ql.Swaption(swap, ql.EuropeanExercise(date(expiry)))
    model = ql.HullWhite(handle, params.mean_reversion, params.volatility)
    swaption.setPricingEngine(ql.JamshidianSwaptionEngine(model))
    return swaption.NPV()


@pytest.mark.parametrize("curve", [FLAT, SLOPED], ids=["flat", "sloped"])
@pytest.mark.parametrize("a, sigma", [(0.05, 0.01), (0.3, 0.015), (0.01, 0.006)])
@pytest.mark.parametrize("expiry, tenor", [(1.0, 1.0), (1.0, 5.0), (5.0, 10.0), (10.0, 5.0)])
@pytest.mark.parametrize("kind", ["payer", "receiver"])
@pytest.mark.parametrize("moneyness", [0.0, -0.01, 0.01])
def test_jamshidian_matches_quantlib(curve, a, sigma, expiry, tenor, kind, moneyness):
    params = HullWhiteParams(mean_reversion=a, volatility=sigma)
    strike = forward_swap_rate(curve, expiry, tenor) + moneyness
    ours = hull_white_swaption_price(
        curve, params, expiry=expiry, tenor=tenor, strike=strike, kind=kind
    )
    # Reference: QuantLib JamshidianSwaptionEngine (floating leg at par, as ours). Its root
    # search stops at 1e-8 in r*, so we allow relative 1e-7 (QuantLib's Jamshidian root tolerance) or the price
    # error that root tolerance implies, whichever is larger (cheap options need the latter:
    # QuantLib's ATM payer and receiver differ by up to ~1e-10 where parity makes them equal).
    ref = _ql_swaption(curve, params, expiry=expiry, tenor=tenor, strike=strike, kind=kind)
    assert ours == pytest.approx(ref, rel=1e-7, abs=_ql_root_tolerance(curve, expiry, tenor, a))


@pytest.mark.parametrize("kind", ["payer", "receiver"])
@pytest.mark.parametrize("moneyness", [0.0, -0.01, 0.015])
def test_decomposition_matches_quantlib_bonds_and_bond_options_tightly(kind, moneyness):
    # On a flat curve QuantLib's HullWhite has an exact f(0, t), so its discountBond(T0, Ti, r)
    # at r = x* + alpha(T0) and its discountBondOption check our strikes and prices at 1e-10
    # (rounding: QuantLib differentiates the curve numerically for f(0, T0)),
    # free of the engine's root tolerance.
    ql.Settings.instance().evaluationDate = TODAY
    params = HullWhiteParams(mean_reversion=0.07, volatility=0.011)
    expiry, tenor = 3.0, 7.0
    strike = forward_swap_rate(FLAT, expiry, tenor) + moneyness
    split = jamshidian_decomposition(FLAT, params, expiry=expiry, tenor=tenor, strike=strike)
    flat = ql.YieldTermStructureHandle(ql.FlatForward(TODAY, 0.03, DC))
    model = ql.HullWhite(flat, params.mean_reversion, params.volatility)
    r_star = split.critical_factor + float(alpha(FLAT, params, expiry))
    option = ql.Option.Put if kind == "payer" else ql.Option.Call
    total, bond = 0.0, 0.0
    for c, t, x in zip(split.coupons, split.payment_times, split.bond_strikes, strict=True):
        # Reference: QuantLib HullWhite.discountBond (the affine bond price, Brigo and Mercurio
        # 2006, ch. 3.3).
        assert x == pytest.approx(model.discountBond(expiry, t, r_star), rel=1e-10)
        bond += c * model.discountBond(expiry, t, r_star)
        # Reference: QuantLib HullWhite.discountBondOption (Brigo and Mercurio 2006, ch. 3.3).
        total += c * model.discountBondOption(option, x, expiry, t)
    assert bond == pytest.approx(1.0, rel=1e-10)  # x* makes the coupon bond worth par
    ours = hull_white_swaption_price(
        FLAT, params, expiry=expiry, tenor=tenor, strike=strike, kind=kind
    )
    assert ours == pytest.approx(total, rel=1e-10)


def test_semiannual_fixed_leg_matches_quantlib():
    params = HullWhiteParams(mean_reversion=0.1, volatility=0.01)
    for kind in ("payer", "receiver"):
        ours = hull_white_swaption_price(
            SLOPED, params, expiry=2.0, tenor=3.0, strike=0.028, kind=kind, frequency=2
        )
        # Reference: QuantLib JamshidianSwaptionEngine with a semi-annual fixed schedule
        # (30/360 on curve and leg so that every period is exactly half a year).
        ref = _ql_swaption(SLOPED, params, expiry=2.0, tenor=3.0, strike=0.028, kind=kind,
                           frequency=2)
        assert ours == pytest.approx(ref, rel=1e-7, abs=_ql_root_tolerance(SLOPED, 2.0, 3.0, 0.1))


def test_annuity_and_forward_rate_match_quantlib_fixed_leg():
    ql.Settings.instance().evaluationDate = TODAY
    expiry, tenor = 3.0, 7.0
    times, _ = fixed_leg_schedule(expiry, tenor)
    handle = _ql_curve(SLOPED, np.concatenate(([expiry], times)))
    schedule = ql.Schedule([_date(expiry)] + [_date(t) for t in times])
    leg = ql.FixedRateLeg(schedule, DC, [1.0], [0.01])
    # Reference: QuantLib CashFlows.bps, the value of 1 bp on the fixed leg = A * 1e-4.
    bps = ql.CashFlows.bps(leg, handle.currentLink(), False, TODAY, TODAY)
    assert swap_annuity(SLOPED, expiry, tenor) == pytest.approx(bps / 1e-4, rel=1e-12)
    # Reference: par rate definition (Brigo and Mercurio 2006, ch. 1): the fixed rate that
    # makes the fixed leg (QuantLib npv at rate F) worth P(T0) - P(Tn).
    fwd = forward_swap_rate(SLOPED, expiry, tenor)
    leg_f = ql.FixedRateLeg(schedule, DC, [1.0], [fwd])
    npv = ql.CashFlows.npv(leg_f, handle.currentLink(), False, TODAY, TODAY)
    par = handle.discount(_date(expiry)) - handle.discount(_date(expiry + tenor))
    assert npv == pytest.approx(par, rel=1e-12)


def test_zero_volatility_gives_intrinsic_value():
    # Common practice: with sigma = 0 the swaption is worth the forward swap value, floored.
    params = HullWhiteParams(mean_reversion=0.1, volatility=0.0)
    annuity = swap_annuity(SLOPED, 2.0, 5.0)
    fwd = forward_swap_rate(SLOPED, 2.0, 5.0)
    payer = hull_white_swaption_price(SLOPED, params, expiry=2.0, tenor=5.0, strike=fwd - 0.01)
    assert payer == pytest.approx(0.01 * annuity, rel=1e-12)
    # and a tiny sigma agrees with it (the limit is continuous), checked against QuantLib
    tiny = HullWhiteParams(mean_reversion=0.1, volatility=1e-7)
    ref = _ql_swaption(SLOPED, tiny, expiry=2.0, tenor=5.0, strike=fwd - 0.01, kind="payer")
    assert payer == pytest.approx(ref, rel=1e-6)


# ----------------------------------------------------------------------------- calibration
TRUE = HullWhiteParams(mean_reversion=0.08, volatility=0.009)
GRID = [(1.0, 2.0), (1.0, 10.0), (5.0, 2.0), (5.0, 10.0), (10.0, 5.0)]


def _quotes_from_quantlib(convention: str, shift: float = 0.0, params=TRUE, grid=GRID):
    """Quotes whose prices are QuantLib's Jamshidian prices under ``params``, turned into vols
    by QuantLib's own implied-vol functions: an outside source for the calibration target."""
    quotes = []
    for expiry, tenor in grid:
        fwd = forward_swap_rate(SLOPED, expiry, tenor)
        ann = swap_annuity(SLOPED, expiry, tenor)
        price = _ql_swaption(SLOPED, params, expiry=expiry, tenor=tenor, strike=fwd, kind="payer")
        if convention == "normal":
            vol = ql.bachelierBlackFormulaImpliedVol(ql.Option.Call, fwd, fwd, expiry, price, ann)
            vol *= 1e4  # quoted in basis points
        else:
            sd = ql.blackFormulaImpliedStdDev(ql.Option.Call, fwd, fwd, price, ann, shift,
                                              0.2 * math.sqrt(expiry), 1e-14, 1000)
            vol = sd / math.sqrt(expiry)
        quotes.append(SwaptionQuote(expiry=expiry, tenor=tenor, vol=vol, convention=convention,
                                    shift=shift))
    return quotes


@pytest.mark.parametrize(
    "convention, shift", [("normal", 0.0), ("lognormal", 0.0), ("shifted_lognormal", 0.01)]
)
def test_calibration_recovers_known_parameters(convention, shift):
    quotes = _quotes_from_quantlib(convention, shift)
    report = calibrate_hull_white_to_swaptions(SLOPED, quotes)
    # Reference: the (a, sigma) that generated the QuantLib prices. QuantLib's Jamshidian root
    # tolerance (1e-8) leaves its prices a relative noise of a few 1e-7, which limits how
    # exactly they encode the parameters: 1e-6 relative; the vol errors that noise leaves are
    # below 1e-3 bp (0.3 x 1e-6 x 1e4 for a 30% lognormal vol).
    assert report.success
    assert report.params.mean_reversion == pytest.approx(TRUE.mean_reversion, rel=1e-6)
    assert report.params.volatility == pytest.approx(TRUE.volatility, rel=1e-6)
    assert report.rmse_bp < 1e-3
    assert len(report.rows) == len(quotes)
    for row, q in zip(report.rows, quotes, strict=True):
        assert row.market_vol == q.vol and row.convention == convention
        assert row.model_price == pytest.approx(row.market_price, rel=1e-6)
        assert abs(row.vol_difference_bp) < 1e-3
    assert report.at_bound == ()


def test_price_objective_with_mixed_conventions_recovers_parameters():
    normal = _quotes_from_quantlib("normal", grid=GRID[:3])
    lognormal = _quotes_from_quantlib("lognormal", grid=GRID[3:])
    report = calibrate_hull_white_to_swaptions(SLOPED, normal + lognormal, objective="price")
    # Reference: the generating parameters, as above.
    assert report.objective == "price"
    assert report.params.mean_reversion == pytest.approx(TRUE.mean_reversion, rel=1e-6)
    assert report.params.volatility == pytest.approx(TRUE.volatility, rel=1e-6)
    assert report.price_rmse_bp < 1e-4


def test_zero_weight_quote_is_ignored_and_fixed_mean_reversion_fits_sigma():
    quotes = _quotes_from_quantlib("normal", grid=GRID[:3])
    # Common practice of weighted least squares: a quote with weight 0 does not move the fit.
    outlier = SwaptionQuote(expiry=7.0, tenor=3.0, vol=150.0, convention="normal", weight=0.0)
    report = calibrate_hull_white_to_swaptions(SLOPED, quotes + [outlier])
    assert report.params.mean_reversion == pytest.approx(TRUE.mean_reversion, rel=1e-6)
    assert report.params.volatility == pytest.approx(TRUE.volatility, rel=1e-6)
    assert report.rows[-1].vol_difference_bp < -10.0  # reported, but not fitted
    # Holding a at its generating value, sigma alone is recovered.
    held = calibrate_hull_white_to_swaptions(
        SLOPED, quotes, fix_mean_reversion=TRUE.mean_reversion
    )
    assert held.fitted == ("volatility",)
    assert held.params.volatility == pytest.approx(TRUE.volatility, rel=1e-7)


def test_quote_price_uses_the_quoted_convention():
    fwd = forward_swap_rate(SLOPED, 5.0, 5.0)
    ann = swap_annuity(SLOPED, 5.0, 5.0)
    q = SwaptionQuote(expiry=5.0, tenor=5.0, vol=85.0, convention="normal")
    # Reference: QuantLib bachelierBlackFormula with stdDev = 0.0085 sqrt(5) and the annuity.
    ref = ql.bachelierBlackFormula(ql.Option.Call, fwd, fwd, 0.0085 * math.sqrt(5.0), ann)
    assert swaption_quote_price(SLOPED, q) == pytest.approx(ref, rel=1e-12)
    q = SwaptionQuote(expiry=5.0, tenor=5.0, vol=0.3, convention="shifted_lognormal", shift=0.02)
    ref = ql.blackFormula(ql.Option.Call, fwd, fwd, 0.3 * math.sqrt(5.0), ann, 0.02)
    assert swaption_quote_price(SLOPED, q) == pytest.approx(ref, rel=1e-12)


def test_bad_quotes_are_rejected_clearly():
    with pytest.raises(MarketDataError, match="basis points"):
        SwaptionQuote(expiry=1.0, tenor=5.0, vol=0.0085, convention="normal")
    with pytest.raises(MarketDataError, match="convention"):
        SwaptionQuote(expiry=1.0, tenor=5.0, vol=0.2, convention="black")
    with pytest.raises(MarketDataError, match="shift"):
        SwaptionQuote(expiry=1.0, tenor=5.0, vol=0.2, convention="lognormal", shift=0.01)
    negative = LogDiscountCurve.from_zero_rates(PILLARS, np.full(PILLARS.size, -0.005))
    q = SwaptionQuote(expiry=2.0, tenor=5.0, vol=0.3, convention="lognormal")
    with pytest.raises(MarketDataError, match="not positive"):
        calibrate_hull_white_to_swaptions(negative, [q])
    long = SwaptionQuote(expiry=20.0, tenor=20.0, vol=80.0, convention="normal")
    with pytest.raises(MarketDataError, match="curve ends"):
        calibrate_hull_white_to_swaptions(SLOPED, [long])
    with pytest.raises(ValueError, match="whole number"):
        fixed_leg_schedule(1.0, 2.5)


def test_negative_strike_matches_quantlib():
    # Jamshidian with negative coupons before the last (negative rates): still one x*.
    negative = LogDiscountCurve.from_zero_rates(PILLARS, np.full(PILLARS.size, -0.004))
    params = HullWhiteParams(mean_reversion=0.05, volatility=0.007)
    fwd = forward_swap_rate(negative, 2.0, 5.0)
    assert fwd < 0.0
    for kind in ("payer", "receiver"):
        ours = hull_white_swaption_price(negative, params, expiry=2.0, tenor=5.0, kind=kind)
        # Reference: QuantLib JamshidianSwaptionEngine, relative 1e-7.
        ref = _ql_swaption(negative, params, expiry=2.0, tenor=5.0, strike=fwd, kind=kind)
        assert ours == pytest.approx(ref, rel=1e-7, abs=_ql_root_tolerance(negative, 2.0, 5.0,
                                                                            0.05))
