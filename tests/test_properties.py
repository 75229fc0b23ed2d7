"""Properties that must hold for any parameters (hypothesis).

The exact transition is the law of a Gaussian Markov process, so the law over ``[t0, t2]``
must equal the composition of the laws over ``[t0, t1]`` and ``[t1, t2]`` (Chapman-Kolmogorov;
for linear Gaussian steps ``s2 = F s0 + c + e``: ``F02 = F12 F01``, ``c02 = F12 c01 + c12``,
``Sigma02 = F12 Sigma01 F12^T + Sigma12``, and the real-world mean shifts compose like the
drifts). This holds however the step is cut, including through the knots of piecewise-constant
volatilities and prices of risk: a strong check of every kernel integral in the step law.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from oracles.hull_white_equity import HullWhiteEquityModel, HullWhitePricesOfRisk

from pqflow.market.curve import LogDiscountCurve
from pqflow.models.hull_white import HullWhiteParams
from pqflow.models.schedule import PiecewiseConstant
from pqflow.models.total_return import TotalReturnIndex

CURVE = LogDiscountCurve.from_zero_rates(
    np.array([1.0, 2, 5, 10, 20, 30, 50, 80]), np.array([0.02, 0.022, 0.026, 0.029, 0.031, 0.032, 0.033, 0.034])
)


@st.composite
def models(draw):
    knots = sorted(draw(st.lists(st.floats(0.3, 30.0), min_size=0, max_size=3, unique=True)))
    def schedule(lo, hi):
        values = draw(st.lists(st.floats(lo, hi), min_size=len(knots) + 1, max_size=len(knots) + 1))
        return PiecewiseConstant(knots=(0.0, *knots), values=tuple(values))
    return HullWhiteEquityModel(
        curve=CURVE,
        rates=HullWhiteParams(mean_reversion=draw(st.floats(1e-3, 1.0)), volatility=draw(st.floats(1e-3, 0.03))),
        equity=TotalReturnIndex(kind="equity", name="eq", level=100.0, income_yield=0.02,
                                volatility=schedule(0.05, 0.4),
                            correlation=draw(st.floats(-0.9, 0.9))),
        prices_of_risk=HullWhitePricesOfRisk(rates=schedule(-0.5, 0.5), equity=schedule(-0.5, 0.8)),
        bond_maturities=(10.0,),
    )


@settings(max_examples=60, deadline=None)
@given(model=models(), t0=st.floats(0.0, 20.0), d1=st.floats(0.01, 10.0), d2=st.floats(0.01, 10.0))
def test_step_laws_compose(model, t0, d1, d2):
    t1, t2 = t0 + d1, t0 + d1 + d2
    a, b, whole = model.step_law(t0, t1), model.step_law(t1, t2), model.step_law(t0, t2)
    cov = lambda law: law.chol @ law.chol.T  # noqa: E731
    assert np.allclose(b.transition @ a.transition, whole.transition, rtol=1e-12, atol=1e-14)
    assert np.allclose(b.transition @ a.drift + b.drift, whole.drift, rtol=1e-9, atol=1e-12)
    assert np.allclose(
        b.transition @ a.real_world_shift + b.real_world_shift, whole.real_world_shift, rtol=1e-9, atol=1e-13
    )
    assert np.allclose(b.transition @ cov(a) @ b.transition.T + cov(b), cov(whole), rtol=1e-8, atol=1e-14)
