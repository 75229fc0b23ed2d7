"""The restricted density of a block that holds a Heston index (the rates, the index and its
variance): the exact likelihood ratio of the block's own transitions.

References used below:
- Girsanov's theorem for correlated Brownian drivers (common practice; Glasserman 2003, ch. 4.6
  and 9.4 for likelihood ratios): with drifts ``Lambda_k`` over a step and step covariance
  ``C dt``, the likelihood ratio of the increments ``dY`` is
  ``exp(-Lambda^T (C dt)^{-1} dY - Lambda^T (C dt)^{-1} Lambda / 2)`` (real-world set, ``dY``
  drawn under P); with constant drifts within the step the increments are sufficient, so it is
  the continuous-time exponent.
- Hull-White's ``dx = -a x dt + sigma dB`` and the total-return index's
  ``d ln S = r dt - sigma^2 dt / 2 + sigma dB`` (Brigo and Mercurio 2006, ch. 3.3) for the
  driver increments recovered from the states.
- A likelihood ratio's mean is 1, and a density restricted to a smaller sigma-algebra is the
  conditional expectation of the full one, so its log-variance is not larger and its effective
  sample size (Kong 1992: ``(sum w)^2 / sum w^2``) is not smaller (common practice).
Monte Carlo tolerances are in standard errors with fixed seeds.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from conftest import DEMO

from pqflow.calibration import assemble_calibration, build_model
from pqflow.config import load_config
from pqflow.measure.blocks import DensityBlock
from pqflow.measure.heston_density import heston_prices_of_risk
from pqflow.models.heston import HestonIndex, HestonParams
from pqflow.simulation.engine import grid_laws, simulate_states
from pqflow.simulation.heston_part import driver_increments, projection_noise_rows
from pqflow.simulation.scenarios import simulate_part

__all__: list[str] = []

NAME = "veldmark_all_share"
BLOCKS = (DensityBlock(name="rates", drivers=("rates",)),
          DensityBlock(name=f"rates_{NAME}", drivers=("rates", NAME)))


@pytest.fixture(scope="module")
def demo():
    return assemble_calibration(load_config(DEMO))


def _spec(demo, p: HestonParams, substeps_per_year: int = 12) -> HestonIndex:
    """The demo all-share as a Heston index projecting on the rates and world equity drivers."""
    corr = demo.driver_correlation
    g = ["rates", "world_equity"]
    c = corr.matrix
    ig = [corr.names.index(d) for d in g]
    i = corr.names.index(NAME)
    beta = np.linalg.solve(c[np.ix_(ig, ig)], c[i, ig])
    explained = float(c[i, ig] @ beta)
    lam = heston_prices_of_risk(kappa=p.kappa, theta=p.theta, xi=p.xi, equity_risk_premium=0.035,
                                real_world_long_run_volatility=None, rho=p.rho, explained=explained)
    return HestonIndex(name=NAME, column=f"equity_{NAME}", level=1000.0, income_yield=0.028, params=p,
                       prices_of_risk=lam, loadings=tuple(zip(g, beta.tolist(), strict=True)), explained=explained,
                       rates_correlation=float(c[i, ig[0]]), substeps_per_year=substeps_per_year)


P_DEMO = HestonParams(v0=0.03, kappa=1.2, theta=0.04, xi=0.5, rho=-0.5)


def test_projection_is_a_linear_functional_of_the_step_noise(demo) -> None:
    """``a_k . e_k`` (the rows the block's Gaussian factor sees) equals the projection increment
    the Heston part reads from the columns, path by path, up to a constant per step."""
    model = build_model(demo, (1.0,))
    spec = _spec(demo, P_DEMO)
    times = np.arange(0.0, 6.0)
    core = simulate_states(model, times, measure="market_consistent", n_paths=400,
                           rng=np.random.default_rng(2), antithetic=False)
    cols = model.columns(times, core.path_states)
    a = projection_noise_rows(model, spec, times)
    tr = grid_laws(model, times).transition
    s = core.states  # (d, n, n_times)
    dp = sum(b * driver_increments(model, d, times, cols, measure="market_consistent") for d, b in spec.loadings)
    worst = 0.0
    for k in range(times.size - 1):
        e = s[:, :, k + 1] - tr[k] @ s[:, :, k]
        diff = a[k] @ e - dp[:, k]
        worst = max(worst, float(diff.std() / dp[:, k].std()))
    print(f"largest spread of a.e - dP across paths, relative to dP's: {worst:.2e}")
    assert worst < 1e-8


@pytest.mark.parametrize("measure", ["real_world", "market_consistent"])
def test_heston_block_density_has_mean_one(demo, measure) -> None:
    """The block's density (rates, the index, its variance) has mean 1 at every year in both sets."""
    model = build_model(demo, (1.0,))
    spec = _spec(demo, P_DEMO, substeps_per_year=4)
    n = 8000
    cols = simulate_part(model, np.arange(0.0, 11.0), measure=measure, n_paths=n, seed=11, batch=0,
                         antithetic=True, heston=(spec,), density_blocks=BLOCKS)
    col = ("q_density_" if measure == "real_world" else "p_density_") + f"rates_{NAME}"
    w = cols[col]
    pairs = 0.5 * (w[0::2] + w[1::2])
    z = (pairs.mean(axis=0) - 1.0)[1:] / (pairs.std(axis=0)[1:] / np.sqrt(pairs.shape[0]))
    print(measure, "block density mean z by year", np.round(z, 2))
    assert np.all(np.abs(z) < 4.0)


def test_heston_block_density_is_the_girsanov_exponent_as_xi_vanishes(demo) -> None:
    """xi -> 0, v0 = theta, one substep per year, constant prices of risk: the variance stays at
    theta and the block's log density is, path by path, the Girsanov exponent of its drivers
    (B_r, the projection P = sum beta_j B_j, the index's own B_perp and the variance's own B_v),
    drifts (lambda_r, sum beta_j lambda_j, lambda_perp sqrt(v), lambda_B sqrt(v)) and per-year
    covariance [[1, c_rP], [c_rP, explained]] (+) I_2, with every increment recovered from the
    written columns."""
    model = build_model(demo, (1.0,))
    lams = {d: 0.0 for d in model.driver_names}
    lams.update({"rates": 0.12, "world_equity": 0.22, "veldmark_property": 0.2})
    model = dataclasses.replace(model, prices_of_risk=lams)
    theta = 0.04
    spec = _spec(demo, HestonParams(v0=theta, kappa=1.2, theta=theta, xi=1e-6, rho=-0.5), substeps_per_year=1)
    lam = spec.prices_of_risk
    times = np.arange(0.0, 11.0)
    n = 200
    cols = simulate_part(model, times, measure="real_world", n_paths=n, seed=7, batch=0, antithetic=False,
                         heston=(spec,), density_blocks=BLOCKS)
    block = np.log(cols[f"q_density_rates_{NAME}"])
    # the recovered real-world increments of each driver over each year
    d_r = driver_increments(model, "rates", times, cols, measure="real_world")
    d_p = sum(b * driver_increments(model, d, times, cols, measure="real_world") for d, b in spec.loadings)
    beta = dict(spec.loadings)
    shift_p = sum(b * lams[d] for d, b in spec.loadings)
    v = cols[f"variance_{NAME}"]
    s_perp = np.sqrt(1.0 - spec.explained)
    log_s = np.log(cols[spec.column] / spec.level)
    carry = np.diff(np.log(cols["cash_account"]), axis=1)
    vk = v[:, :-1]
    premium = s_perp * lam.equity * vk + np.sqrt(vk) * shift_p
    d_perp = ((np.diff(log_s, axis=1) - carry - premium + 0.5 * vk) / np.sqrt(vk) - d_p) / s_perp
    a_v = spec.params.rho / s_perp
    c_v = np.sqrt(1.0 - a_v * a_v)
    kappa_theta = spec.params.kappa * theta
    d_wv = (np.diff(v, axis=1) - (kappa_theta - lam.kappa_real_world * vk)) / (spec.params.xi * np.sqrt(vk))
    d_bv = (d_wv - a_v * d_perp) / c_v
    corr = demo.driver_correlation
    c_rp = sum(b * corr.pair("rates", d) if d != "rates" else b for d, b in beta.items())
    c2 = np.array([[1.0, c_rp], [c_rp, spec.explained]])
    c2_inv = np.linalg.inv(c2)
    lam2 = np.array([lams["rates"], shift_p])
    closed = np.zeros((n, times.size))
    for k in range(times.size - 1):
        dy = np.stack([d_r[:, k], d_p[:, k]])
        own = np.stack([lam.equity * np.sqrt(vk[:, k]), lam.variance * np.sqrt(vk[:, k])])
        step = -(lam2 @ c2_inv @ dy) - 0.5 * lam2 @ c2_inv @ lam2
        step = step - own[0] * d_perp[:, k] - own[1] * d_bv[:, k] - 0.5 * (own**2).sum(axis=0)
        closed[:, k + 1] = closed[:, k] + step
    err = np.abs(block - closed).max()
    full = np.log(cols["q_density"])
    print(f"xi = 1e-6: largest |block log density - Girsanov exponent| {err:.2e}; log-density variance at "
          f"10 years: block {block[:, -1].var():.4f}, closed form {closed[:, -1].var():.4f}, "
          f"full {full[:, -1].var():.4f}")
    assert err < 1e-6
    assert not np.allclose(block, full)


def test_heston_block_ess_is_no_worse_than_the_full_density(demo) -> None:
    """On the demo economy (every driver priced as the house view says) with a Heston all-share
    over 30 years, built as a run builds it (the all-share's Gaussian stand-in priced as the
    other drivers imply). The population ESS is ``n / E[w^2]`` and ``E[w_B^2] <= E[w^2]`` for a
    conditional expectation: judged by the paired difference ``w^2 - w_B^2`` (mean not below
    -3 SE) at every year where the sample can estimate it (full ESS at least 5% of the paths;
    beyond, both estimates rest on a few paths and are printed only). The sample ESS is printed."""
    spec = _spec(demo, P_DEMO, substeps_per_year=4)
    model = build_model(dataclasses.replace(demo, stochastic_volatility={NAME: spec}), (1.0,))
    n = 2000
    times = np.arange(0.0, 31.0)
    cols = simulate_part(model, times, measure="real_world", n_paths=n, seed=13, batch=0, antithetic=True,
                         heston=(spec,), density_blocks=BLOCKS)

    def ess(w):
        return w.sum(axis=0) ** 2 / (w * w).sum(axis=0)

    full, block = ess(cols["q_density"]), ess(cols[f"q_density_rates_{NAME}"])
    for t in (1, 5, 10, 20, 30):
        print(f"year {t:2d}: ESS full {full[t]:7.1f}, block rates_{NAME} {block[t]:7.1f} of {n}")
    judged = np.flatnonzero(full >= 0.05 * n)[1:]
    w, wb = cols["q_density"], cols[f"q_density_rates_{NAME}"]
    diff = (w * w - wb * wb)[:, judged]
    diff = 0.5 * (diff[0::2] + diff[1::2])  # antithetic pairs are the sampling units
    z = diff.mean(axis=0) / (diff.std(axis=0) / np.sqrt(diff.shape[0]))
    print(f"judged years {judged.min()}..{judged.max()}: z of E[w^2 - w_B^2] {np.round(z, 2)}")
    assert judged.size >= 5
    assert np.all(z > -3.0)
    assert block[judged[-1]] > full[judged[-1]]
