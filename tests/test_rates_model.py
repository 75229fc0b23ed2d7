"""The rates-model interface (pqflow.models.rates) and the one index forward variance.

Hull-White and G2++ parameters must answer every question the economy, the calibration and
calibration.json ask of "the rates"; the one forward-variance implementation
(pqflow.models.equity.forward_variance) must agree with the independent single-part closed forms
the test oracles write out (tests/oracles/: Brigo and Mercurio, *Interest Rate Models - Theory
and Practice*, 2nd ed., 2006, ch. 3.3 and 4.2), under a piecewise-constant index volatility.
"""

from __future__ import annotations

import numpy as np
import pytest
from oracles import g2pp_equity

from pqflow.models import g2pp, hull_white
from pqflow.models.equity import equity_total_variance
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.models.hull_white import HullWhiteParams, phi2
from pqflow.models.rates import RATES_DRIVERS, RATES_MODELS, rates_from_json
from pqflow.models.schedule import PiecewiseConstant, segments
from pqflow.models.total_return import TotalReturnIndex

HW = HullWhiteParams(mean_reversion=0.05, volatility=0.009)
G2 = G2PlusPlusParams(a=0.6, sigma=0.011, b=0.04, eta=0.008, rho=-0.6)
VOL = PiecewiseConstant(knots=(0.0, 2.5, 5.5), values=(0.2, 0.16, 0.18))


@pytest.mark.parametrize("rates", [HW, G2])
def test_calibration_json_round_trip(rates):
    # Source: common practice (a serialisation must read back what it wrote).
    assert rates_from_json(rates.to_json()) == rates
    assert RATES_MODELS[rates.model] is type(rates)
    assert RATES_DRIVERS[rates.model] == rates.drivers == tuple(d for _, _, d in rates.factor_rates())


def test_integrated_variance_is_the_models_own_closed_form():
    # Source: Brigo and Mercurio 2006, ch. 3.3 (Hull-White V) and ch. 4.2 (G2++ V), as coded in
    # the models' own modules; the protocol must not compute a different quantity.
    u = np.array([0.5, 3.0, 17.0])
    assert np.array_equal(HW.integrated_variance(u), hull_white.integrated_variance(HW, u))
    assert np.array_equal(G2.integrated_variance(u), g2pp.integrated_variance(G2, u))


def test_equity_correlation_forms_are_refused_across_models():
    # Source: common practice (a clear error for the wrong form of an input).
    with pytest.raises(ValueError, match="one number"):
        HW.equity_correlation((0.1, 0.2), strict=True)
    with pytest.raises(ValueError, match=r"pair \(rho_xS, rho_yS\)"):
        G2.equity_correlation(0.1, strict=True)
    with pytest.raises(ValueError, match="strictly inside"):
        HW.equity_correlation(1.0, strict=True)


@pytest.mark.parametrize("expiry", [0.7, 4.0, 12.0])
def test_hull_white_forward_variance_matches_the_scalar_closed_form(expiry):
    # Source: Brigo and Mercurio 2006, ch. 3.3: v(T) = int sigma_S^2 + 2 rho sigma sigma_S B(T-u) du
    # + V(T), integrated piece by piece (phi2 the integral of B), written out here independently.
    rho = -0.25
    ref = float(hull_white.integrated_variance(HW, expiry))
    for u0, u1, (vol,) in segments(0.0, expiry, VOL):
        ref += vol**2 * (u1 - u0)
        ref += 2.0 * rho * vol * HW.volatility * float(
            phi2(HW.mean_reversion, expiry - u0) - phi2(HW.mean_reversion, expiry - u1)
        )
    eq = TotalReturnIndex(kind="equity", name="eq", level=100.0, income_yield=0.0, volatility=VOL, correlation=rho)
    assert equity_total_variance(HW, eq, expiry) == pytest.approx(ref, rel=1e-13)


@pytest.mark.parametrize("expiry", [0.7, 4.0, 12.0])
def test_g2pp_forward_variance_matches_the_g2pp_oracle(expiry):
    # Source: the G2++ + equity oracle's closed form (tests/oracles/g2pp_equity.py, Brigo and
    # Mercurio 2006, ch. 4.2), itself checked against quadrature in tests/test_g2pp_transition.py.
    rx, ry = 0.08, -0.14
    oracle = g2pp_equity.equity_total_variance(
        G2, g2pp_equity.G2EquityParams(name="eq", level=100.0, dividend_yield=0.0, volatility=VOL,
                                       correlation_x=rx, correlation_y=ry), expiry)
    eq = TotalReturnIndex(kind="equity", name="eq", level=100.0, income_yield=0.0, volatility=VOL, correlation=(rx, ry))
    assert equity_total_variance(G2, eq, expiry) == pytest.approx(oracle, rel=1e-13)
