"""Heston smile calibration (``pqflow.calibration.heston_fit``): parameter recovery from quotes
generated with known parameters (common practice for a calibration routine), the per-quote
report, bounds and bad inputs.

The quotes are made by pricing with the known parameters (the characteristic function is
checked against QuantLib in ``tests/test_heston_pricing.py``) and inverting Black's formula;
the fit must find the parameters back and reprice every quote to well below a vol point.
"""

from __future__ import annotations

import numpy as np
import pytest

from pqflow.calibration.formulas import black_implied_vol
from pqflow.calibration.heston_fit import HestonBounds, HestonQuote, calibrate_heston
from pqflow.errors import CalibrationError
from pqflow.market.curve import LogDiscountCurve
from pqflow.models.heston import HestonParams, heston_option_price
from pqflow.models.hull_white import HullWhiteParams

__all__: list[str] = []

CURVE = LogDiscountCurve.from_zero_rates(np.array([1.0, 30.0]), np.array([0.025, 0.03]))
HW = HullWhiteParams(mean_reversion=0.05, volatility=0.01)
TRUE = HestonParams(v0=0.03, kappa=1.2, theta=0.05, xi=0.45, rho=-0.65)
EXPIRIES = (0.5, 1.0, 2.0, 5.0, 10.0)
MONEYNESS = (0.7, 0.85, 1.0, 1.15, 1.3)


def _quotes(p: HestonParams, rho_rates: float, level=100.0, q=0.02) -> list[HestonQuote]:
    out = []
    for t in EXPIRIES:
        df = float(CURVE.discount(t))
        f = level * np.exp(-q * t) / df
        for m in MONEYNESS:
            kind = "call" if m >= 1 else "put"
            price = float(heston_option_price(p, level=level, dividend_yield=q, discount=df, expiry=t, strike=m * f,
                                              kind=kind, rates=HW, correlation=rho_rates))
            vol = float(black_implied_vol(price, f, m * f, t, annuity=df, kind=kind))
            out.append(HestonQuote(expiry=t, moneyness=m, implied_vol=vol))
    return out


@pytest.mark.parametrize("rho_rates", [0.0, 0.25])
def test_parameters_recovered_from_generated_quotes(rho_rates: float) -> None:
    quotes = _quotes(TRUE, rho_rates)
    rep = calibrate_heston(CURVE, HW, level=100.0, dividend_yield=0.02, correlation=rho_rates, quotes=quotes)
    got = rep.params.as_dict()
    print({k: round(v, 6) for k, v in got.items()}, "RMSE vol points", rep.rmse_vol_points)
    for name, true in TRUE.as_dict().items():
        assert abs(got[name] - true) < 1e-5 * max(1.0, abs(true)), name
    assert rep.rmse_vol_points < 1e-3
    assert rep.converged
    assert len(rep.rows) == len(quotes)
    assert abs(rep.feller_ratio - 2 * got["kappa"] * got["theta"] / got["xi"] ** 2) < 1e-12
    assert ("H1-HW" in rep.pricing) == (rho_rates != 0.0)
    js = rep.to_json()
    assert js["rows"][0]["market_vol"] == quotes[0].implied_vol and "feller_ratio" in js


def test_fit_reports_the_misfit_of_a_smile_the_model_cannot_match() -> None:
    """A smile with a kink no Heston parameters produce: the fit's RMSE is reported (not zero)
    and the rows' differences are model minus market in vol points."""
    quotes = [HestonQuote(expiry=q.expiry, moneyness=q.moneyness,
                          implied_vol=q.implied_vol + (0.03 if q.moneyness == 1.0 else 0.0)) for q in _quotes(TRUE,
                                                                                                              0.0)]
    rep = calibrate_heston(CURVE, HW, level=100.0, dividend_yield=0.02, correlation=0.0, quotes=quotes)
    assert rep.rmse_vol_points > 0.5
    for r in rep.rows:
        assert abs(r.vol_points - 100 * (r.model_vol - r.market_vol)) < 1e-12


def test_bounds_are_respected_and_reported() -> None:
    quotes = _quotes(TRUE, 0.0)
    b = HestonBounds(lower=(1e-4, 0.05, 1e-4, 0.01, -0.5), upper=(1.0, 10.0, 1.0, 2.0, 0.5),
                     initial=(0.04, 1.5, 0.04, 0.5, -0.4))
    rep = calibrate_heston(CURVE, HW, level=100.0, dividend_yield=0.02, correlation=0.0, quotes=quotes, bounds=b)
    assert rep.params.rho >= -0.5 - 1e-12 and "rho" in rep.at_bounds


def test_bad_inputs() -> None:
    with pytest.raises(ValueError, match="outside"):
        HestonBounds(initial=(0.04, 1.5, 0.04, 0.5, -1.5))
    with pytest.raises(CalibrationError, match="at least 5 quotes"):
        calibrate_heston(CURVE, HW, level=100.0, dividend_yield=0.0, correlation=0.0,
                         quotes=_quotes(TRUE, 0.0)[:4], label="world_equity")
