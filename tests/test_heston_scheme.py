"""The Heston index's simulation scheme and its density weights
(``pqflow.simulation.heston_scheme.simulate_heston_paths``, ``pqflow.measure.heston_density``).

References used below:
- Cox, Ingersoll and Ross (1985): the conditional mean and variance of the square-root
  variance over a step (``variance_mean`` / ``variance_variance``).
- Girsanov's theorem (common practice): with a deterministic variance (``xi -> 0``) the density
  is ``exp(-int lambda dB - int lambda^2 dt / 2)`` with ``lambda = lambda_S sqrt(v(t))`` and
  ``v(t) = theta + (v0 - theta) e^{-kappa t}``.
- Martingale property of the deflated total-return index and the density's mean 1 (common
  practice; Glasserman 2003, ch. 4.6 for likelihood ratios).
- The semi-closed-form prices of ``pqflow.models.heston`` (checked against QuantLib in
  ``tests/test_heston_pricing.py``) for the scheme's bias on option prices.
Monte Carlo tolerances are in standard errors with fixed seeds.
"""

from __future__ import annotations

import numpy as np
import pytest

from pqflow.measure.heston_density import heston_prices_of_risk
from pqflow.models.heston import (
    HestonParams,
    heston_option_price,
)
from pqflow.simulation.heston_scheme import simulate_heston_paths

__all__: list[str] = []

P = HestonParams(v0=0.029, kappa=1.1, theta=0.042, xi=0.55, rho=-0.72)
LAM = heston_prices_of_risk(kappa=P.kappa, theta=P.theta, xi=P.xi, equity_risk_premium=0.04,
                            real_world_long_run_volatility=0.18, rho=P.rho)



# The variance's conditional moments over a step (test-only closed forms of the CIR process).


def variance_mean(p: HestonParams, v: np.ndarray | float, h: np.ndarray | float) -> np.ndarray:
    """``E[v_{t+h} | v_t = v] = theta + (v - theta) e^{-kappa h}`` (CIR; Cox, Ingersoll and Ross,
    *Econometrica* 53 (1985))."""
    return p.theta + (np.asarray(v, dtype=float) - p.theta) * np.exp(-p.kappa * np.asarray(h))


def variance_variance(p: HestonParams, v: np.ndarray | float, h: np.ndarray | float) -> np.ndarray:
    """``Var[v_{t+h} | v_t = v] = v xi^2 e^{-kh}(1 - e^{-kh})/k + theta xi^2 (1 - e^{-kh})^2/(2k)``
    (Cox, Ingersoll and Ross 1985)."""
    v = np.asarray(v, dtype=float)
    e = np.exp(-p.kappa * np.asarray(h, dtype=float))
    return v * p.xi**2 * e * (1.0 - e) / p.kappa + p.theta * p.xi**2 * (1.0 - e) ** 2 / (2.0 * p.kappa)


def _run(p, times, *, measure, n, substeps, r=0.02, seed=1, lam=LAM, antithetic=False):
    carry = np.full((n, times.size - 1), r) * np.diff(times)[None, :]
    return simulate_heston_paths(p, times, np.random.default_rng(seed), measure=measure, n_paths=n,
                                 substeps=substeps, log_carry=carry, prices_of_risk=lam, antithetic=antithetic)


def test_one_step_variance_moments_match_cir_closed_forms() -> None:
    """One substep from v0 (far from 0: no truncation). The scheme's step has mean
    ``v + kappa (theta - v) h`` and variance ``xi^2 v h``, the CIR conditional moments (Cox-
    Ingersoll-Ross 1985) to first order in ``h``: the simulated moments match the scheme's to
    Monte Carlo precision, and the scheme's differ from CIR's by less than ``(kappa h)^2`` in the
    mean and ``2 kappa h`` relative in the variance, shrinking linearly with ``h``."""
    p = HestonParams(v0=0.06, kappa=1.5, theta=0.04, xi=0.2, rho=-0.5)  # 0 lies 4 step SDs below v0
    n = 400_000
    rel_var = []
    for h in (1.0 / 12.0, 1.0 / 52.0, 1.0 / 365.0):
        paths = _run(p, np.array([0.0, h]), measure="market_consistent", n=n, substeps=1, lam=None)
        v = paths.variance[:, 1]
        m_s, var_s = p.v0 + p.kappa * (p.theta - p.v0) * h, p.xi**2 * p.v0 * h
        m, var = float(variance_mean(p, p.v0, h)), float(variance_variance(p, p.v0, h))
        se_m, se_v = np.sqrt(var_s / n), var_s * np.sqrt(2.0 / n)
        print(f"h {h:.4f}: mean {v.mean():.6f} scheme {m_s:.6f} CIR {m:.6f} (SE {se_m:.1e}); "
              f"variance {v.var():.4e} scheme {var_s:.4e} CIR {var:.4e} (SE {se_v:.1e})")
        assert abs(v.mean() - m_s) < 4 * se_m
        assert abs(v.var() - var_s) < 4 * se_v
        assert abs(m_s - m) < (p.kappa * h) ** 2 * abs(p.theta - p.v0)
        rel_var.append(abs(var_s / var - 1.0))
        assert rel_var[-1] < 2 * p.kappa * h
    assert rel_var[0] > rel_var[1] > rel_var[2]


def test_density_has_mean_one_and_reweights_one_set_into_the_other() -> None:
    """E[w_t] = 1 in both sets, and the real-world set weighted by q_density reproduces the
    market-consistent set's mean variance and deflated index (same scheme, so no bias)."""
    times = np.arange(0.0, 11.0)
    n = 40_000
    rw = _run(P, times, measure="real_world", n=n, substeps=4, seed=2)
    mc = _run(P, times, measure="market_consistent", n=n, substeps=4, seed=3)
    for paths in (rw, mc):
        w = np.exp(paths.log_density)
        se = w.std(axis=0) / np.sqrt(n)
        assert np.all(np.abs(w.mean(axis=0) - 1.0) <= 4 * se + 1e-12)
    w = np.exp(rw.log_density[:, -1])
    vq = (w * rw.variance[:, -1])
    diff = vq.mean() - mc.variance[:, -1].mean()
    se = np.sqrt(vq.var() / n + mc.variance[:, -1].var() / n)
    print(f"E_Q[v_10]: reweighted real world {vq.mean():.5f}, market consistent {mc.variance[:, -1].mean():.5f} (SE "
          f"{se:.1e})")
    assert abs(diff) < 4 * se
    # the real-world variance does revert to its own level (0.18^2), the market-consistent one to theta
    assert abs(rw.variance[:, -1].mean() - 0.18**2) < abs(rw.variance[:, -1].mean() - P.theta)


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
def test_deflated_index_is_a_martingale(measure: str) -> None:
    """S_t / B_t has mean 1 under Q: directly in the market-consistent set, with q_density in the
    real-world set (where the index itself earns the premium)."""
    times = np.arange(0.0, 21.0, 2.0)
    n = 40_000
    paths = _run(P, times, measure=measure, n=n, substeps=6, seed=4, antithetic=True)
    carry = np.concatenate([np.zeros((n, 1)), np.cumsum(np.full((n, times.size - 1), 0.02 * 2.0), axis=1)], axis=1)
    deflated = np.exp(paths.log_return - carry)
    x = deflated * np.exp(paths.log_density) if measure == "real_world" else deflated
    pairs = 0.5 * (x[0::2] + x[1::2])
    se = pairs.std(axis=0) / np.sqrt(pairs.shape[0])
    z = (pairs.mean(axis=0) - 1.0)[1:] / se[1:]
    print(measure, "martingale z-scores:", np.round(z, 2))
    assert np.all(np.abs(z) < 4.0)
    if measure == "real_world":  # and the premium is there: the index outgrows cash
        assert deflated[:, -1].mean() > 1.2
    # antithetic partners are simulated from -z, not mirrored: their variance paths differ and
    # their log returns do not sum to a constant
    assert not np.allclose(paths.variance[0], paths.variance[1])
    total = paths.log_return[0::2, -1] + paths.log_return[1::2, -1]
    assert total.std() > 0.01


def test_density_tends_to_closed_form_girsanov_as_xi_vanishes() -> None:
    """xi -> 0 (deterministic variance), no variance price of risk: the scheme's log density
    agrees with Girsanov's exponent for the two correlated drivers (B_S, W_v) shifted by
    a = (lambda_S sqrt(v(t)), 0): -a' C^{-1} dB - a' C^{-1} a dt / 2, i.e.
    -int lambda_S sqrt(v) (dB_S - rho dW_v) / (1 - rho^2) - int lambda_S^2 v / (1 - rho^2) dt / 2,
    with v(t) the CIR mean path, up to the Euler variance path's O(h) error."""
    p = HestonParams(v0=0.05, kappa=1.0, theta=0.03, xi=1e-9, rho=-0.5)
    lam = heston_prices_of_risk(kappa=p.kappa, theta=p.theta, xi=p.xi, equity_risk_premium=0.04,
                                real_world_long_run_volatility=None, rho=p.rho)
    # no variance price of risk: W_v = rho B_S + c B_v is not shifted
    assert abs(p.rho * lam.equity + np.sqrt(1 - p.rho**2) * lam.variance) < 1e-15
    sub = 2000
    times = np.array([0.0, 1.0, 2.0])
    n = 200
    rng_seed = 5
    paths = _run(p, times, measure="real_world", n=n, substeps=sub, seed=rng_seed, lam=lam, r=0.0)
    # rebuild the drivers' increments from the same stream: (z_S, z_perp) per substep
    rng = np.random.default_rng(rng_seed)
    h = 1.0 / sub
    t_left = np.arange(2 * sub) * h
    v_exact = p.theta + (p.v0 - p.theta) * np.exp(-p.kappa * t_left)
    z = np.concatenate([rng.standard_normal((sub, 2, n)) for _ in range(2)], axis=0)  # (2 sub, 2, n)
    d_bs = np.sqrt(h) * z[:, 0]
    d_wv = np.sqrt(h) * (p.rho * z[:, 0] + np.sqrt(1 - p.rho**2) * z[:, 1])
    one_m = 1.0 - p.rho**2
    lam_t = lam.equity * np.sqrt(v_exact)
    integral_v = p.theta * 2.0 + (p.v0 - p.theta) * (1 - np.exp(-2.0 * p.kappa)) / p.kappa
    closed = (-(lam_t[:, None] * (d_bs - p.rho * d_wv)).sum(axis=0) / one_m
              - 0.5 * lam.equity**2 * integral_v / one_m)
    err = np.max(np.abs(paths.log_density[:, -1] - closed))
    print(f"max |scheme - closed-form Girsanov exponent| at xi = 1e-9, h = 1/{sub}: {err:.2e}")
    assert err < 1e-3


def test_refused_prices_of_risk() -> None:
    with pytest.raises(ValueError, match="infinite variance price of risk"):
        heston_prices_of_risk(kappa=1.0, theta=0.04, xi=0.5, equity_risk_premium=0.04,
                              real_world_long_run_volatility=0.0,
                              rho=0.0)
    lam = heston_prices_of_risk(kappa=1.0, theta=0.04, xi=0.5, equity_risk_premium=0.04,
                                real_world_long_run_volatility=0.25, rho=0.0)
    # same kappa theta under both measures (equivalence), premium pi at the real-world long-run variance
    assert abs(lam.kappa_real_world * lam.theta_real_world - 1.0 * 0.04) < 1e-15
    assert abs(lam.equity * lam.theta_real_world - 0.04) < 1e-15


def test_scheme_bias_on_option_prices() -> None:
    """The scheme's bias on European prices against the semi-closed form (deterministic rates,
    P: v0 0.029, kappa 1.1, theta 0.042, xi 0.55, rho -0.72, Feller ratio 0.31). Measured with 200,000 paths
    (README table; `python benchmarks/heston_accuracy.py bias`): with annual substeps the bias
    reaches 1.9 per 100 of spot (5 years, 130%
    call); with monthly substeps at most 0.10 per 100 from 5 years on (0.21 at the 1-year
    forward). Checked here with 40,000 antithetic paths: monthly within 0.15 + 4 SE, and annual
    substeps visibly biased (the check can tell the two apart)."""
    r, q, n = 0.025, 0.028, 40_000
    for t in (5.0, 10.0):
        times = np.arange(0.0, t + 1e-9)
        df, fwd = np.exp(-r * t), np.exp((r - q) * t)
        m = np.array([0.7, 1.0, 1.3])
        kinds = np.where(m < 1, "put", "call")
        ref = heston_option_price(P, level=1.0, dividend_yield=q, discount=df, expiry=t, strike=m * fwd, kind=kinds)
        bias = {}
        for sub in (1, 12):
            paths = _run(P, times, measure="market_consistent", n=n, substeps=sub, r=r, seed=8, lam=None,
                         antithetic=True)
            st = np.exp(paths.log_return[:, -1] - q * t)
            pay = df * np.where(m < 1, np.maximum(m * fwd - st[:, None], 0.0), np.maximum(st[:, None] - m * fwd, 0.0))
            pairs = 0.5 * (pay[0::2] + pay[1::2])
            se = 100 * pairs.std(axis=0) / np.sqrt(pairs.shape[0])
            bias[sub] = 100 * (pairs.mean(axis=0) - ref)
            print(f"T {t:g}, {sub:2d} substeps a year: bias per 100 of spot {np.round(bias[sub], 3)} (SE "
                  f"{np.round(se, 3)})")
            if sub == 12:
                assert np.all(np.abs(bias[sub]) < 0.15 + 4 * se)
        assert np.max(np.abs(bias[1])) > 0.5


def test_real_world_expected_growth_closed_form_against_the_scheme() -> None:
    """ln E^P[S_t/(S_0 B_t)] from the CIR Laplace transform (Cox-Ingersoll-Ross 1985, at a
    negative rate) against the real-world scheme with weekly substeps (bias of the scheme
    included in the tolerance: 4 SE + 0.002)."""
    from pqflow.models.heston import real_world_log_excess_growth

    times = np.arange(0.0, 11.0, 2.0)
    n = 40_000
    paths = _run(P, times, measure="real_world", n=n, substeps=52, seed=9, antithetic=True)
    carry = 0.02 * times[None, :]
    x = np.exp(paths.log_return - carry)
    pairs = 0.5 * (x[0::2] + x[1::2])
    mean, se = pairs.mean(axis=0)[1:], pairs.std(axis=0)[1:] / np.sqrt(pairs.shape[0])
    ref = np.exp(real_world_log_excess_growth(P, LAM, times[1:]))
    print("E[S/B]/S0 by t: MC", np.round(mean, 4), "closed form", np.round(ref, 4), "SE", np.round(se, 4))
    assert np.all(np.abs(mean - ref) < 4 * se + 0.002 * ref)
    # the premium per year tends to lambda_S theta' (slightly above pi because of the leverage term)
    with pytest.raises(ValueError, match="not finite"):
        big = heston_prices_of_risk(kappa=0.3, theta=0.04, xi=1.0, equity_risk_premium=0.5,
                                    real_world_long_run_volatility=0.2, rho=0.5)
        real_world_log_excess_growth(HestonParams(v0=0.04, kappa=0.3, theta=0.04, xi=1.0, rho=0.5), big, 10.0)
