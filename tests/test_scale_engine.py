"""The fast engine against the plain definition of the exact scheme, and its invariances.

The reference here is the scheme as written in the models' interface (``pqflow.models.base``:
``s_{k+1} = F_k s_k + c_k (+ m_k) + L_k z_k``, Brigo and Mercurio 2006, ch. 3) and the density formula of
Girsanov's theorem (``log dQ/dP = -eta.z - |eta|^2/2``), run path by path in the obvious loop:
checking an optimised implementation against a straightforward one is common practice.
"""

from __future__ import annotations

import numpy as np
import pytest
from oracles.hull_white_equity import HullWhiteEquityModel, HullWhitePricesOfRisk

from pqflow.market.curve import LogDiscountCurve
from pqflow.measure.density import density_coefficients
from pqflow.models.hull_white import HullWhiteParams, cash_account, zcb_price
from pqflow.models.schedule import PiecewiseConstant
from pqflow.models.total_return import TotalReturnIndex
from pqflow.simulation import engine
from pqflow.simulation.engine import simulate_batch, simulate_states
from pqflow.storage.names import bond_column, equity_column


def _model(schedule: bool = False) -> HullWhiteEquityModel:
    pillars = np.array([1.0, 2.0, 5.0, 10.0, 20.0, 40.0])
    zeros = 0.025 + 0.01 * (1.0 - np.exp(-pillars / 7.0))  # invented upward-sloping curve
    vol = PiecewiseConstant(knots=(0.0, 0.55), values=(0.2, 0.15)) if schedule else 0.18
    return HullWhiteEquityModel(
        curve=LogDiscountCurve.from_zero_rates(pillars, zeros),
        rates=HullWhiteParams(mean_reversion=0.07, volatility=0.011),
        equity=TotalReturnIndex(kind="equity", name="eq", level=250.0, income_yield=0.0,
                                volatility=vol, correlation=-0.25),
        prices_of_risk=HullWhitePricesOfRisk(rates=-0.2, equity=0.3),
        bond_maturities=(1.0, 5.0, 10.0),
    )


def _reference(model, times, z, measure):
    """Path-by-path loop of the exact scheme; ``z`` has shape ``(n_paths, n_steps, d)``."""
    n, k_steps, d = z.shape
    states = np.empty((n, k_steps + 1, d))
    log_w = np.zeros((n, k_steps + 1))
    for i in range(n):
        s = model.initial_state().copy()
        states[i, 0] = s
        for k in range(k_steps):
            law = model.step_law(float(times[k]), float(times[k + 1]))
            shift = law.real_world_shift if measure == "real_world" else 0.0
            s = law.transition @ s + law.drift + shift + law.chol @ z[i, k]
            states[i, k + 1] = s
            eta = density_coefficients(law)
            sign = -1.0 if measure == "real_world" else 1.0
            log_w[i, k + 1] = log_w[i, k] + sign * eta @ z[i, k] - 0.5 * eta @ eta
    return states, np.exp(log_w)


def _engine_normals(seed, n, k_steps, d):
    """The numbers the engine draws: one (K, d, n) standard-normal array, as (n, K, d)."""
    return np.random.default_rng(seed).standard_normal((k_steps, d, n)).transpose(2, 0, 1)


@pytest.mark.parametrize("measure", ["real_world", "market_consistent"])
@pytest.mark.parametrize("schedule", [False, True])
def test_engine_equals_the_plain_loop(measure, schedule):
    model = _model(schedule)
    times = np.concatenate([np.arange(0.0, 1.0, 1.0 / 12.0), [1.0, 1.5, 3.0, 7.0]])  # uneven grid
    n = 7
    core = simulate_states(model, times, measure=measure, n_paths=n, rng=np.random.default_rng(11), antithetic=False)
    states, density = _reference(model, times, _engine_normals(11, n, times.size - 1, 3), measure)
    np.testing.assert_allclose(core.path_states, states, rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(core.density, density, rtol=1e-11)


def test_blocks_do_not_change_the_bits(monkeypatch):
    # Drawing the normals block by block must give the numbers of one draw (numpy's generators
    # fill arrays sequentially; common practice, checked here rather than assumed).
    model = _model()
    times = np.arange(0.0, 10.01, 0.25)
    args = dict(measure="real_world", n_paths=6, antithetic=True)
    monkeypatch.setattr(engine, "_BLOCK", 7)
    a = simulate_batch(model, times, rng=np.random.default_rng(3), **args)
    monkeypatch.setattr(engine, "_BLOCK", 64)
    b = simulate_batch(model, times, rng=np.random.default_rng(3), **args)
    for c in a:
        assert np.array_equal(a[c], b[c]), c


def test_antithetic_partner_is_the_path_of_minus_z():
    # Antithetic variates (Glasserman, Monte Carlo Methods in Financial Engineering, 2003,
    # s. 4.2): path 2j+1 is driven by -z of path 2j. Reference: the plain loop with -z.
    model = _model()
    times = np.arange(0.0, 3.01, 0.5)
    n = 4
    core = simulate_states(model, times, measure="real_world", n_paths=n, rng=np.random.default_rng(5), antithetic=True)
    half = _engine_normals(5, n // 2, times.size - 1, 3)
    z = np.empty((n, times.size - 1, 3))
    z[0::2], z[1::2] = half, -half
    states, density = _reference(model, times, z, "real_world")
    np.testing.assert_allclose(core.path_states, states, rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(core.density, density, rtol=1e-11)


def test_columns_are_the_closed_forms():
    # Bonds and cash account from the states must equal the Hull-White closed forms evaluated
    # one maturity at a time (Brigo and Mercurio 2006, ch. 3.3, as in pqflow.models.hull_white).
    model = _model()
    times = np.arange(0.0, 5.01, 1.0)
    out = simulate_batch(model, times, measure="market_consistent", n_paths=5, rng=np.random.default_rng(9),
                         antithetic=False)
    core = simulate_states(model, times, measure="market_consistent", n_paths=5, rng=np.random.default_rng(9),
                           antithetic=False)
    x, integral, log_s = core.states
    for m in model.bond_maturities:
        np.testing.assert_allclose(out[bond_column(m)], zcb_price(model.curve, model.rates, times[None, :], m, x),
                                   rtol=1e-13)
    np.testing.assert_allclose(out["cash_account"], cash_account(model.curve, model.rates, times[None, :], integral),
                               rtol=1e-13)
    np.testing.assert_allclose(out[equity_column("eq")], np.exp(log_s), rtol=1e-15)
    np.testing.assert_allclose(out["deflator"], 1.0 / out["cash_account"], rtol=1e-15)
    only = simulate_batch(model, times, measure="market_consistent", n_paths=5, rng=np.random.default_rng(9),
                          antithetic=False, columns=("zcb_5y",))
    assert set(only) == {"cash_account", "zcb_5y", "deflator", "p_density"}
    assert np.array_equal(only["zcb_5y"], out["zcb_5y"])
    with pytest.raises(ValueError, match="unknown output columns"):
        simulate_batch(model, times, measure="market_consistent", n_paths=2, rng=np.random.default_rng(1),
                       antithetic=False, columns=("zcb_7y",))


def test_warm_and_cold_law_cache_give_the_same_bits():
    model = _model()
    times = np.arange(0.0, 4.01, 1.0 / 12.0)
    kw = dict(measure="real_world", n_paths=4, antithetic=False)
    engine._LAWS.clear()
    cold = simulate_batch(model, times, rng=np.random.default_rng(2), **kw)
    warm = simulate_batch(model, times, rng=np.random.default_rng(2), **kw)
    for c in cold:
        assert np.array_equal(cold[c], warm[c]), c


def test_bad_inputs_are_refused():
    model = _model()
    with pytest.raises(ValueError, match="even number"):
        simulate_states(model, np.array([0.0, 1.0]), measure="real_world", n_paths=3, rng=np.random.default_rng(0),
                        antithetic=True)
    with pytest.raises(ValueError, match="starts at 0"):
        simulate_states(model, np.array([0.5, 1.0]), measure="real_world", n_paths=2, rng=np.random.default_rng(0),
                        antithetic=False)
    with pytest.raises(ValueError, match="unknown measure"):
        simulate_states(model, np.array([0.0, 1.0]), measure="p", n_paths=2, rng=np.random.default_rng(0),
                        antithetic=False)


def test_reused_buffers_give_the_same_bits():
    # Reusing buffers across batches (Workspace) must not change a single output bit.
    model = _model()
    times = np.arange(0.0, 6.01, 1.0 / 12.0)
    ws = engine.Workspace()
    for seed, anti in ((1, True), (2, False), (1, True)):
        kw = dict(measure="real_world", n_paths=6, antithetic=anti)
        fresh = simulate_batch(model, times, rng=np.random.default_rng(seed), **kw)
        reused = simulate_batch(model, times, rng=np.random.default_rng(seed), workspace=ws, **kw)
        for c in fresh:
            assert np.array_equal(fresh[c], reused[c]), c
