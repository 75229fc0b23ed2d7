"""Par-swap bootstrap against textbook identities and QuantLib."""

from __future__ import annotations

import numpy as np
import pytest
from curve_helpers import (
    bootstrap_par_swaps,
    max_par_repricing_error,
    par_rates_from_curve,
    smith_wilson_from_par_rates,
)

from pqflow.errors import MarketDataError

# An invented swap curve quoted at the usual pillars (annual fixed leg); 4, 6, 8, 9, 11, 13, 14,
# 16-19 years are missing and get filled.
MATURITIES = np.array([1, 2, 3, 5, 7, 10, 12, 15, 20])
PAR_RATES = np.array([0.0325, 0.0301, 0.0288, 0.0278, 0.0278, 0.0283, 0.0286, 0.0290, 0.0288])


@pytest.mark.parametrize("rate", [0.0, 0.025, -0.004])
def test_flat_par_curve_gives_flat_annual_zero_rates(rate):
    # Textbook identity (common practice): a par bond paying s annually, priced off a flat
    # annually compounded zero curve at s, is worth par; so flat par rates give P(n) = (1+s)^-n.
    result = bootstrap_par_swaps(np.array([1, 2, 3, 5, 10, 30]), np.full(6, rate))
    np.testing.assert_allclose(result.annual_zero_rates(), rate, rtol=0, atol=1e-14)
    np.testing.assert_allclose(
        result.discount_factors, (1.0 + rate) ** -result.maturities, rtol=1e-14
    )


def test_quoted_par_rates_are_repriced_and_gaps_are_linear_in_par_rate():
    result = bootstrap_par_swaps(MATURITIES, PAR_RATES)
    curve = result.curve()
    # Par-swap identity s_n sum P(k) + P(n) = 1 on the bootstrapped curve (definition).
    assert max_par_repricing_error(curve, MATURITIES, PAR_RATES) < 1e-14
    # The documented filling rule: par rates linear between quotes at the missing years.
    years = np.arange(1, 21)
    np.testing.assert_allclose(
        par_rates_from_curve(curve, years),
        np.interp(years, MATURITIES, PAR_RATES),
        rtol=0,
        atol=1e-14,
    )
    assert result.filled.sum() == 20 - MATURITIES.size
    assert not result.filled[MATURITIES - 1].any()


def test_bootstrap_matches_quantlib():
    ql = pytest.importorskip("QuantLib")
    years = np.arange(1, 21)
    rates = np.interp(years, MATURITIES, PAR_RATES)
    today = ql.Date(15, ql.January, 2024)
    old = ql.Settings.instance().evaluationDate
    ql.Settings.instance().evaluationDate = today
    try:
        # QuantLib 1.44: par bonds with annual coupons (a swap's fixed leg at par), SimpleDayCounter
        # so that k years is exactly k, no calendar; every annual pillar quoted, so the bootstrap
        # does not depend on the interpolation between pillars.
        dc = ql.SimpleDayCounter()
        helpers = []
        for n, s in zip(years, rates, strict=True):
            schedule = ql.Schedule(
                today,
                today + ql.Period(int(n), ql.Years),
                ql.Period(ql.Annual),
                ql.NullCalendar(),
                ql.Unadjusted,
                ql.Unadjusted,
                ql.DateGeneration.Backward,
                False,
            )
            helpers.append(
                ql.FixedRateBondHelper(
                    ql.QuoteHandle(ql.SimpleQuote(100.0)),
                    0,
                    100.0,
                    schedule,
                    [float(s)],
                    dc,
                    ql.Unadjusted,
                    100.0,
                )
            )
        ql_curve = ql.PiecewiseLogLinearDiscount(today, helpers, dc)
        ql_dfs = np.array([ql_curve.discount(today + ql.Period(int(k), ql.Years)) for k in years])
        assert [dc.yearFraction(today, today + ql.Period(int(k), ql.Years)) for k in years] == list(
            years.astype(float)
        )
    finally:
        ql.Settings.instance().evaluationDate = old
    ours = bootstrap_par_swaps(years, rates)
    # QuantLib's iterative bootstrap solves each pillar to its default accuracy (1e-12).
    np.testing.assert_allclose(ours.discount_factors, ql_dfs, rtol=1e-12, atol=0)


def test_smith_wilson_curve_reprices_par_inputs():
    # The repricing check applies to any curve with the DiscountCurve interface; the Smith-Wilson
    # fit to the quotes (no filling) reprices them exactly by construction (EIOPA's method).
    sw, _ = smith_wilson_from_par_rates(MATURITIES, PAR_RATES, ufr=0.0345)
    assert max_par_repricing_error(sw, MATURITIES, PAR_RATES) < 1e-10
    # and the check is not vacuous: the bootstrap's filled curve differs from Smith-Wilson's
    # interpolation at the unquoted years.
    filled = bootstrap_par_swaps(MATURITIES, PAR_RATES).curve()
    assert (
        max_par_repricing_error(
            sw, np.arange(1, 21), par_rates_from_curve(filled, np.arange(1, 21))
        )
        > 1e-6
    )


def test_credit_risk_adjustment_is_deducted():
    # Delegated Regulation (EU) 2015/35, Art. 45: the adjustment is deducted from the swap rates.
    a = bootstrap_par_swaps(MATURITIES, PAR_RATES, credit_risk_adjustment_bp=10.0)
    b = bootstrap_par_swaps(MATURITIES, PAR_RATES - 0.001)
    np.testing.assert_allclose(a.discount_factors, b.discount_factors, rtol=1e-15)
    assert (
        max_par_repricing_error(a.curve(), MATURITIES, PAR_RATES, credit_risk_adjustment_bp=10.0)
        < 1e-14
    )


def test_bad_quotes_are_refused():
    with pytest.raises(MarketDataError, match="whole-year"):
        bootstrap_par_swaps(np.array([1.0, 2.5]), np.array([0.01, 0.02]))
    with pytest.raises(MarketDataError, match="strictly increasing"):
        bootstrap_par_swaps(np.array([1, 3, 2]), np.array([0.01, 0.02, 0.03]))
    with pytest.raises(MarketDataError, match="non-positive discount factor"):
        bootstrap_par_swaps(np.array([1, 2]), np.array([0.5, 3.0]))  # P(2) = (1 - 3/1.5)/4 < 0
    with pytest.raises(MarketDataError, match="non-positive discount factor"):
        bootstrap_par_swaps(np.array([1]), np.array([-1.0]))
