"""The fit of G2++ ``(a, sigma, b, eta, rho)`` to a swaption grid, on quotes whose prices come
from QuantLib's ``G2SwaptionEngine`` under known parameters (an outside source for the target).

Identification: on a 3 x 3 grid of ATM quotes (expiries 1, 5, 10 years; tenors 2, 5, 10 years)
with a fast and a slow factor far apart, the five parameters are identified and recovered; we
check both the parameters and the repricing of every quote. QuantLib's prices carry a relative
error of a few 1e-10 (its Brent tolerance of 1e-6 on the exercise level, see
tests/test_g2pp.py), which bounds how exactly they encode the parameters: we allow 1e-6
relative on the parameters and 1e-4 bp on the vols. Where parameters are not identified (close
mean reversions, or fewer quotes) a fit should be judged by the repricing, not the parameters.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql

from pqflow.calibration.g2pp_swaptions import (
    G2_PARAMETER_NAMES,
    calibrate_g2pp_to_swaptions,
)
from pqflow.calibration.swaptions import SwaptionQuote, fixed_leg_schedule, forward_swap_rate, swap_annuity
from pqflow.errors import MarketDataError
from pqflow.market.curve import LogDiscountCurve
from pqflow.models.g2pp import G2PlusPlusParams

__all__: list[str] = []

TODAY = ql.Date(15, 1, 2025)
DC = ql.Actual365Fixed()
PILLARS = np.array([0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0])
SLOPED = LogDiscountCurve.from_zero_rates(
    PILLARS, np.array([0.021, 0.022, 0.024, 0.025, 0.027, 0.028, 0.030, 0.031, 0.031, 0.030])
)
TRUE = G2PlusPlusParams(a=0.6, sigma=0.011, b=0.04, eta=0.007, rho=-0.6)  # invented
GRID = [(e, t) for e in (1.0, 5.0, 10.0) for t in (2.0, 5.0, 10.0)]


def _date(t: float) -> ql.Date:
    # a QuantLib convention: dates from day counts so Actual365Fixed year fractions are exact.
    return TODAY + int(round(t * 365))


def _ql_payer(p: G2PlusPlusParams, expiry: float, tenor: float, strike: float) -> float:
    """QuantLib G2SwaptionEngine(model, 10 sd, 400 intervals) price of an annual payer."""
    ql.Settings.instance().evaluationDate = TODAY
    times, _ = fixed_leg_schedule(expiry, tenor)
    ts = np.unique(np.concatenate(([0.0, expiry], times, [SLOPED.max_maturity])))
    handle = ql.YieldTermStructureHandle(
        ql.DiscountCurve([_date(t) for t in ts], [1.0] + [float(SLOPED.discount(t)) for t in ts[1:]], DC)
    )
    schedule = ql.Schedule([_date(expiry)] + [_date(t) for t in times])
    index = ql.IborIndex("pq", ql.Period(12, ql.Months), 0, ql.EURCurrency(), ql.NullCalendar(),
                         ql.Unadjusted, False, DC, handle)
    swap = ql.VanillaSwap(ql.Swap.Payer, 1.0, schedule, strike, DC, schedule, index, 0.0, DC)
    swaption = ql.Swaption(swap, ql.EuropeanExercise(_date(expiry)))
    swaption.setPricingEngine(ql.G2SwaptionEngine(ql.G2(handle, p.a, p.sigma, p.b, p.eta, p.rho), 10.0, 400))
    return swaption.NPV()


def _quotes(convention: str, shift: float = 0.0, grid=GRID):
    """ATM quotes from QuantLib G2 prices, turned into vols by QuantLib's implied-vol functions."""
    quotes = []
    for expiry, tenor in grid:
        fwd = forward_swap_rate(SLOPED, expiry, tenor)
        ann = swap_annuity(SLOPED, expiry, tenor)
        price = _ql_payer(TRUE, expiry, tenor, fwd)
        if convention == "normal":
            vol = 1e4 * ql.bachelierBlackFormulaImpliedVol(ql.Option.Call, fwd, fwd, expiry, price, ann)
        else:
            sd = ql.blackFormulaImpliedStdDev(ql.Option.Call, fwd, fwd, price, ann, shift,
                                              0.2 * math.sqrt(expiry), 1e-14, 1000)
            vol = sd / math.sqrt(expiry)
        quotes.append(SwaptionQuote(expiry=expiry, tenor=tenor, vol=vol, convention=convention, shift=shift))
    return quotes


def _assert_params(fitted: G2PlusPlusParams, rel: float) -> None:
    for name in G2_PARAMETER_NAMES:
        assert getattr(fitted, name) == pytest.approx(getattr(TRUE, name), rel=rel), name


def test_fit_recovers_known_parameters_from_the_default_start():
    quotes = _quotes("normal")
    report = calibrate_g2pp_to_swaptions(SLOPED, quotes)
    # Reference: the parameters that generated QuantLib's prices (module docstring: 1e-6).
    assert report.success and report.at_bound == ()
    assert report.fitted == G2_PARAMETER_NAMES and report.objective == "implied_vol"
    _assert_params(report.params, 1e-6)
    assert report.rmse_bp < 1e-4
    assert len(report.rows) == len(quotes)
    for row, q in zip(report.rows, quotes, strict=True):
        assert row.market_vol == q.vol and row.convention == "normal"
        assert abs(row.vol_difference_bp) < 1e-4
        assert row.model_price == pytest.approx(row.market_price, rel=1e-7)


def test_price_objective_with_a_held_parameter_and_relabelled_start():
    # Shifted-lognormal quotes, price objective, the slow factor's volatility held at its true
    # value, starting from the relabelled model (fast factor second): the report relabels the
    # factors so that a >= b, and names the fitted parameters in that labelling.
    quotes = _quotes("shifted_lognormal", shift=0.01)
    start = G2PlusPlusParams(a=0.05, sigma=0.0065, b=0.5, eta=0.012, rho=-0.5)  # slow factor first
    report = calibrate_g2pp_to_swaptions(SLOPED, quotes, objective="price", initial=start,
                                         fixed={"sigma": TRUE.eta})
    assert report.success and report.objective == "price"
    assert report.fitted == ("a", "sigma", "b", "rho")  # "eta" (the slow factor's vol) held
    # Reference: the generating parameters, as above.
    _assert_params(report.params, 1e-6)
    assert report.price_rmse_bp < 1e-5


def test_bad_requests_are_rejected_clearly():
    q = SwaptionQuote(expiry=1.0, tenor=2.0, vol=50.0, convention="normal")
    with pytest.raises(ValueError, match="unknown G2"):
        calibrate_g2pp_to_swaptions(SLOPED, [q], fixed={"kappa": 0.1})
    with pytest.raises(ValueError, match="nothing to fit"):
        calibrate_g2pp_to_swaptions(SLOPED, [q], fixed=dict(zip(G2_PARAMETER_NAMES, (0.5, 0.01, 0.05, 0.01, 0.0),
                                                                strict=True)))
    with pytest.raises(MarketDataError, match="no swaption quotes"):
        calibrate_g2pp_to_swaptions(SLOPED, [])
    long = SwaptionQuote(expiry=20.0, tenor=20.0, vol=80.0, convention="normal")
    with pytest.raises(MarketDataError, match="curve ends"):
        calibrate_g2pp_to_swaptions(SLOPED, [long])
