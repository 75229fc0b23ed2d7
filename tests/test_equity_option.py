"""European equity options under Hull-White rates against QuantLib and a textbook value.

References used below:
- QuantLib 1.44 (PyPI ``QuantLib``): ``AnalyticBSMHullWhiteEngine(rho, bsm_process, hw_model)``.
- Hull, *Options, Futures and Other Derivatives*: the Black-Scholes worked example
  ``S = 42, K = 40, r = 10%, sigma = 20%, T = 0.5`` (book prints call 4.76, put 0.81; the
  four-decimal values 4.7594 and 0.8086 are from memory, Hull's standard worked example).
- Put-call parity ``C - P = S_0 e^{-qT} - K P(0,T)`` (common practice; Hull, same book).

QuantLib's correlation convention, found by experiment (``test_quantlib_correlation_sign``
below pins it): the engine's ``rho`` enters the variance as ``+2 rho sigma_S sigma (T - B(T))/a``,
i.e. it is the correlation of the equity and *short-rate* shocks, the same sign as pqflow's
``TotalReturnIndex.correlation``. (Equity against bond prices would be the opposite sign.) A Monte
Carlo price from pqflow's own simulation, where ``rho`` is the correlation of the simulated
shocks, agrees with QuantLib at ``+rho`` and not at ``-rho``.
"""

from __future__ import annotations

import numpy as np
import pytest
import QuantLib as ql
from oracles.hull_white_equity import HullWhiteEquityModel, HullWhitePricesOfRisk

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.equity import equity_option_price
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.total_return import TotalReturnIndex
from pqflow.simulation.engine import simulate_batch
from pqflow.storage.names import equity_column

__all__: list[str] = []

TODAY = ql.Date(15, 1, 2025)
DAY_COUNT = ql.Actual365Fixed()


@pytest.fixture(autouse=True)
def _evaluation_date():
    saved = ql.Settings.instance().evaluationDate
    ql.Settings.instance().evaluationDate = TODAY
    yield
    ql.Settings.instance().evaluationDate = saved


def _flat_curve(rate: float) -> LogDiscountCurve:
    return LogDiscountCurve.from_zero_rates(np.array([1.0, 30.0, 60.0]), np.full(3, rate))


def _ql_flat(rate: float) -> ql.YieldTermStructureHandle:
    return ql.YieldTermStructureHandle(
        ql.FlatForward(TODAY, rate, DAY_COUNT, ql.Continuous, ql.NoFrequency)
    )


def _ql_price(
    *, spot: float, rate: float, div: float, vol: float, a: float, sigma: float, rho: float,
    days: int, strike: float, kind: str,
) -> float:
    r_ts, q_ts = _ql_flat(rate), _ql_flat(div)
    vol_ts = ql.BlackVolTermStructureHandle(
        ql.BlackConstantVol(TODAY, ql.NullCalendar(), vol, DAY_COUNT)
    )
    process = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(spot)), q_ts, r_ts, vol_ts
    )
    model = ql.HullWhite(r_ts, a, sigma)
    opt_type = ql.Option.Call if kind == "call" else ql.Option.Put
    option = ql.VanillaOption(
        ql.PlainVanillaPayoff(opt_type, strike), ql.EuropeanExercise(TODAY + days)
    )
    option.setPricingEngine(ql.AnalyticBSMHullWhiteEngine(rho, process, model))
    return option.NPV()


@pytest.mark.parametrize("kind", ["call", "put"])
@pytest.mark.parametrize("rho", [-0.7, -0.2, 0.0, 0.4])
@pytest.mark.parametrize(
    ("days", "strike"),
    [(365, 80.0), (365, 100.0), (3650, 100.0), (3650, 150.0), (10950, 120.0), (91, 105.0)],
)
def test_equity_option_matches_quantlib_bsm_hull_white(
    kind: str, rho: float, days: int, strike: float
) -> None:
    spot, rate, div, vol, a, sigma = 100.0, 0.03, 0.015, 0.2, 0.05, 0.01
    rates = HullWhiteParams(mean_reversion=a, volatility=sigma)
    equity = TotalReturnIndex(
        kind="equity", name="eq", level=spot, income_yield=div, volatility=vol, correlation=rho
    )
    got = equity_option_price(
        _flat_curve(rate), rates, equity, expiry=days / 365.0, strike=strike, kind=kind
    )
    expected = _ql_price(  # QuantLib AnalyticBSMHullWhiteEngine
        spot=spot, rate=rate, div=div, vol=vol, a=a, sigma=sigma, rho=rho,
        days=days, strike=strike, kind=kind,
    )
    assert got == pytest.approx(expected, rel=1e-9)


def test_quantlib_correlation_sign() -> None:
    # The experiment behind the module docstring: pqflow's rho equals QuantLib's +rho, and the
    # two signs give clearly different prices (so the equality above is not a coincidence).
    rates = HullWhiteParams(mean_reversion=0.05, volatility=0.01)
    equity = TotalReturnIndex(
        kind="equity", name="eq", level=100.0, income_yield=0.0, volatility=0.2, correlation=0.6
    )
    got = equity_option_price(_flat_curve(0.03), rates, equity, expiry=10.0, strike=100.0)
    common = dict(spot=100.0, rate=0.03, div=0.0, vol=0.2, a=0.05, sigma=0.01, days=3650,
                  strike=100.0, kind="call")
    plus = _ql_price(rho=0.6, **common)  # QuantLib
    minus = _ql_price(rho=-0.6, **common)  # QuantLib
    assert got == pytest.approx(plus, rel=1e-9)
    assert abs(got - minus) > 0.1 * got


def test_monte_carlo_price_agrees_with_positive_quantlib_correlation() -> None:
    # pqflow's exact simulation defines rho as the correlation of the equity and short-rate
    # shocks; its Monte Carlo price E_Q[(S_T e^{-qT} - K)^+ / B_T] matches QuantLib's engine at
    # +rho within 4 standard errors and misses -rho by many (QuantLib; common practice MC).
    spot, rate, div, vol = 100.0, 0.03, 0.01, 0.2
    a, sigma, rho, expiry, strike = 0.05, 0.015, 0.6, 10.0, 100.0
    model = HullWhiteEquityModel(
        curve=_flat_curve(rate),
        rates=HullWhiteParams(mean_reversion=a, volatility=sigma),
        equity=TotalReturnIndex(
            kind="equity", name="eq", level=spot, income_yield=div, volatility=vol, correlation=rho
        ),
        prices_of_risk=HullWhitePricesOfRisk(rates=0.0, equity=0.0),
        bond_maturities=(),
    )
    out = simulate_batch(
        model, np.array([0.0, expiry]), measure="market_consistent", n_paths=40_000,
        rng=np.random.default_rng(20250115), antithetic=False,
    )
    price_index = out[equity_column("eq")][:, -1] * np.exp(-div * expiry)
    discounted = np.maximum(price_index - strike, 0.0) / out["cash_account"][:, -1]
    mc, se = discounted.mean(), discounted.std(ddof=1) / np.sqrt(discounted.size)
    common = dict(spot=spot, rate=rate, div=div, vol=vol, a=a, sigma=sigma, days=3650,
                  strike=strike, kind="call")
    plus = _ql_price(rho=rho, **common)  # QuantLib, engine correlation +rho
    minus = _ql_price(rho=-rho, **common)  # QuantLib, engine correlation -rho
    assert abs(mc - plus) < 4.0 * se
    assert abs(mc - minus) > 10.0 * se


@pytest.mark.parametrize(("kind", "hull_value"), [("call", 4.7594), ("put", 0.8086)])
def test_tiny_rate_volatility_gives_hull_black_scholes_example(
    kind: str, hull_value: float
) -> None:
    # Hull's worked example (S=42, K=40, r=10%, sigma=20%, T=0.5; continuously compounded r, as
    # in Black-Scholes): call 4.7594, put 0.8086 (from memory, four decimals). With a Hull-White
    # sigma of 1e-10 and a flat 10% continuously compounded curve the model is Black-Scholes.
    rates = HullWhiteParams(mean_reversion=0.1, volatility=1e-10)
    equity = TotalReturnIndex(
        kind="equity", name="eq", level=42.0, income_yield=0.0, volatility=0.2, correlation=0.3
    )
    got = equity_option_price(_flat_curve(0.10), rates, equity, expiry=0.5, strike=40.0, kind=kind)
    assert got == pytest.approx(hull_value, abs=5e-5)  # rounding of the four printed decimals


@pytest.mark.parametrize("rho", [-0.5, 0.0, 0.5])
@pytest.mark.parametrize(("expiry", "strike"), [(0.5, 90.0), (5.0, 100.0), (20.0, 130.0)])
def test_put_call_parity(rho: float, expiry: float, strike: float) -> None:
    # C - P = S_0 e^{-qT} - K P(0,T) (put-call parity, common practice; model free), here on a
    # non-flat curve.
    curve = LogDiscountCurve.from_zero_rates(
        np.array([0.5, 1.0, 2.0, 5.0, 10.0, 20.0, 30.0]),
        np.array([0.020, 0.022, 0.025, 0.030, 0.033, 0.034, 0.033]),
    )
    rates = HullWhiteParams(mean_reversion=0.04, volatility=0.009)
    equity = TotalReturnIndex(
        kind="equity", name="eq", level=100.0, income_yield=0.02, volatility=0.17, correlation=rho
    )
    call = equity_option_price(curve, rates, equity, expiry=expiry, strike=strike, kind="call")
    put = equity_option_price(curve, rates, equity, expiry=expiry, strike=strike, kind="put")
    parity = 100.0 * np.exp(-0.02 * expiry) - strike * float(curve.discount(expiry))
    assert call - put == pytest.approx(parity, rel=1e-11, abs=1e-11)
