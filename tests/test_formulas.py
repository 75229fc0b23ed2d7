"""Bachelier and (shifted) Black prices and implied vols against QuantLib and a textbook value."""

from __future__ import annotations

import math

import numpy as np
import pytest
import QuantLib as ql

from pqflow.calibration.formulas import (
    bachelier_implied_vol,
    bachelier_price,
    black_implied_vol,
    black_price,
    implied_vol,
    option_price,
)
from pqflow.errors import MarketDataError

_QL_TYPE = {"call": ql.Option.Call, "put": ql.Option.Put}

# (forward, strike, vol, expiry, discount): at, in and out of the money, short and long.
NORMAL_CASES = [
    (0.03, 0.03, 0.0085, 5.0, 0.87),
    (0.03, 0.02, 0.0100, 1.0, 0.97),
    (0.01, 0.035, 0.0060, 10.0, 0.70),
    (-0.004, 0.001, 0.0040, 2.0, 1.01),  # negative forward: the normal model allows it
    (0.05, 0.05, 0.0150, 0.25, 0.99),
]
BLACK_CASES = [
    (0.03, 0.03, 0.25, 5.0, 0.87, 0.0),
    (0.03, 0.02, 0.40, 1.0, 0.97, 0.0),
    (0.01, 0.035, 0.15, 10.0, 0.70, 0.0),
    (-0.004, 0.001, 0.30, 2.0, 1.01, 0.02),  # shifted: F + shift > 0
    (100.0, 120.0, 0.20, 3.0, 0.90, 0.0),
    (0.02, 0.02, 0.60, 20.0, 0.55, 0.01),
]


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize("f, k, v, t, df", NORMAL_CASES)
def test_bachelier_matches_quantlib(f, k, v, t, df, kind):
    ours = float(bachelier_price(f, k, v, t, annuity=df, kind=kind))
    # Reference: QuantLib bachelierBlackFormula(type, strike, forward, stdDev, discount).
    ref = ql.bachelierBlackFormula(_QL_TYPE[kind], k, f, v * math.sqrt(t), df)
    assert ours == pytest.approx(ref, rel=1e-12, abs=1e-16)


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize("f, k, v, t, df, shift", BLACK_CASES)
def test_black_and_shifted_black_match_quantlib(f, k, v, t, df, shift, kind):
    ours = float(black_price(f, k, v, t, annuity=df, kind=kind, shift=shift))
    # Reference: QuantLib blackFormula(type, strike, forward, stdDev, discount, displacement).
    ref = ql.blackFormula(_QL_TYPE[kind], k, f, v * math.sqrt(t), df, shift)
    assert ours == pytest.approx(ref, rel=1e-12, abs=1e-16)


def test_black76_textbook_value():
    # Haug, The Complete Guide to Option Pricing Formulas (1998), Black-76 on a futures price,
    # as reproduced in QuantLib's test suite: F = K = 19, r = 10%, T = 0.75, sigma = 28% gives
    # a call (and put) of 1.7011 (printed to 4 decimals).
    df = math.exp(-0.10 * 0.75)
    for kind in ("call", "put"):
        value = float(black_price(19.0, 19.0, 0.28, 0.75, annuity=df, kind=kind))
        assert value == pytest.approx(1.7011, abs=5e-5)


def test_prices_broadcast_like_quantlib_elementwise():
    f = np.array([0.02, 0.03, 0.04])[:, None]  # shape (3, 1)
    k = np.array([0.025, 0.03])[None, :]  # shape (1, 2)
    out = bachelier_price(f, k, 0.007, 4.0, annuity=0.9, kind="payer")
    assert out.shape == (3, 2)
    for i in range(3):
        for j in range(2):
            # Reference: QuantLib bachelierBlackFormula, one element at a time.
            ref = ql.bachelierBlackFormula(ql.Option.Call, k[0, j], f[i, 0], 0.007 * 2.0, 0.9)
            assert out[i, j] == pytest.approx(ref, rel=1e-12)
    out = black_price(f, k, 0.3, 4.0, annuity=0.9, kind="receiver", shift=0.01)
    for i in range(3):
        for j in range(2):
            ref = ql.blackFormula(ql.Option.Put, k[0, j], f[i, 0], 0.6, 0.9, 0.01)
            assert out[i, j] == pytest.approx(ref, rel=1e-12)


def test_zero_volatility_gives_discounted_intrinsic_value():
    # Common practice: with no volatility an option is worth its discounted intrinsic value.
    assert float(bachelier_price(0.03, 0.02, 0.0, 2.0, annuity=0.9)) == pytest.approx(0.009)
    assert float(bachelier_price(0.03, 0.02, 0.0, 2.0, annuity=0.9, kind="put")) == 0.0
    assert float(black_price(0.03, 0.02, 0.3, 0.0, annuity=0.9)) == pytest.approx(0.009)


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize("f, k, v, t, df", NORMAL_CASES)
def test_bachelier_implied_vol_round_trip_from_quantlib_prices(f, k, v, t, df, kind):
    # Reference: the price is QuantLib's, made from the known vol v; inversion must return v.
    price = ql.bachelierBlackFormula(_QL_TYPE[kind], k, f, v * math.sqrt(t), df)
    ours = float(bachelier_implied_vol(price, f, k, t, annuity=df, kind=kind))
    assert ours == pytest.approx(v, rel=1e-9)
    # and QuantLib's own inversion agrees (bachelierBlackFormulaImpliedVol)
    ref = ql.bachelierBlackFormulaImpliedVol(_QL_TYPE[kind], k, f, t, price, df)
    assert ours == pytest.approx(ref, rel=1e-6)


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize("f, k, v, t, df, shift", BLACK_CASES)
def test_black_implied_vol_round_trip_from_quantlib_prices(f, k, v, t, df, shift, kind):
    # Reference: QuantLib blackFormula price from the known vol v; inversion must return v.
    price = ql.blackFormula(_QL_TYPE[kind], k, f, v * math.sqrt(t), df, shift)
    ours = float(black_implied_vol(price, f, k, t, annuity=df, kind=kind, shift=shift))
    assert ours == pytest.approx(v, rel=1e-9)


def test_implied_vol_is_vectorised():
    vols = np.array([[0.004, 0.008], [0.012, 0.02]])  # shape (2, 2)
    prices = bachelier_price(0.02, 0.025, vols, 3.0, annuity=0.95)
    back = implied_vol("normal", prices, 0.02, 0.025, 3.0, annuity=0.95)
    assert back.shape == (2, 2)
    # Reference: the known vols the QuantLib-checked prices were made from.
    np.testing.assert_allclose(back, vols, rtol=1e-9)
    lognormal = option_price("shifted_lognormal", 0.02, 0.025, vols * 25, 3.0, shift=0.005)
    back = implied_vol("shifted_lognormal", lognormal, 0.02, 0.025, 3.0, shift=0.005)
    np.testing.assert_allclose(back, vols * 25, rtol=1e-9)


def test_price_below_intrinsic_value_is_rejected():
    # No-arbitrage bound (Merton 1973, from memory; common practice): an option is worth at
    # least its discounted intrinsic value A max(F - K, 0).
    with pytest.raises(MarketDataError, match="below the no-arbitrage lower bound"):
        bachelier_implied_vol(0.009, 0.03, 0.02, 2.0, annuity=1.0)
    with pytest.raises(MarketDataError, match="below the no-arbitrage lower bound"):
        black_implied_vol(0.5 * 0.01 * 0.9, 0.03, 0.02, 2.0, annuity=0.9)


def test_black_price_at_or_above_forward_is_rejected():
    # No-arbitrage bound (common practice): a call is worth less than the (shifted) forward,
    # a put less than the (shifted) strike, discounted; no Black vol reaches them.
    with pytest.raises(MarketDataError, match="upper bound"):
        black_implied_vol(0.03 * 0.9, 0.03, 0.02, 2.0, annuity=0.9)
    with pytest.raises(MarketDataError, match="upper bound"):
        black_implied_vol(0.031, 0.03, 0.02, 2.0, annuity=1.0, kind="put", shift=0.01)
    # the same prices just inside the bound do invert
    assert float(black_implied_vol(0.03 * 0.9 * 0.999, 0.03, 0.02, 2.0, annuity=0.9)) > 1.0


def test_bad_inputs_are_rejected():
    with pytest.raises(ValueError, match="forward \\+ shift > 0"):
        black_price(-0.01, 0.02, 0.2, 1.0)
    with pytest.raises(ValueError, match="option kind"):
        bachelier_price(0.01, 0.02, 0.01, 1.0, kind="straddle")
    with pytest.raises(ValueError, match="no shift"):
        option_price("lognormal", 0.01, 0.01, 0.2, 1.0, shift=0.01)
    with pytest.raises(ValueError, match="vol convention"):
        implied_vol("sabr", 0.001, 0.01, 0.01, 1.0)
