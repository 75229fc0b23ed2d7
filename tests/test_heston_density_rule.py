"""Size and power of the density check's verdict rule on densities that carry a Heston part.

A density with a Heston index is the economy's lognormal density times the Heston part's
``exp(-int eta dz - int |eta|^2 / 2)`` with ``eta`` proportional to ``sqrt(v)``: given the
variance path it is lognormal with the random variance ``S = int |eta|^2 dt``, so ``log w`` is
not Gaussian and the lognormal identity estimates ``log E[w] + Var(S) / 8`` (the cumulants of a
variance mixture; the same arithmetic as in tests/test_mean_tests.py). How much that matters is
measured here by simulation on correct data (mean exactly 1: the scheme's likelihood ratio), in
families of the 10 yearly cells of one simulated set of 1,000 antithetic pairs, at the
Bonferroni family level 1% (as the density check judges a column's times):

- the demo_smile fit (invented data; its prices of risk are small, ``S`` has a small spread);
- the same fit with a house-view real-world long-run volatility of 20% (against the fit's 20.5%:
  ``kappa^P`` and ``theta^P`` about 5% from the market-consistent ones) and of 15% (allowed; it
  moves them by 65% and 39% and gives the index's and the variance's own shocks large prices of
  risk).

Finding: on the demo_smile fit and at 20% both rules hold the level over 10 years; with the 15%
house view the lognormal identity raises false alarms in nearly every family and the robust t
(which the check uses for every density holding a Heston part) in about a quarter (probed, 100
families each: 3% at 19%, 8% at 18%, 15% at 17%, 20% at 16%). So the check judges such
densities only within :data:`pqflow.validation.mean_tests.HESTON_MEASURED_SHIFT` of the
market-consistent kappa and theta, and reports the cells inconclusive beyond it.

Sources: the lognormal mean identity and Bonferroni's inequality (common practice); the binomial
standard error of a simulated rejection rate ``sqrt(p (1 - p) / R)`` (common practice in Monte
Carlo studies of tests); a likelihood ratio's mean is 1 (Glasserman 2003, ch. 4.6). Every
measured size and power is printed in the terminal summary (``report_statistic``).
"""

from __future__ import annotations

import numpy as np
import pytest

from pqflow.measure.heston_density import HestonPricesOfRisk, heston_prices_of_risk
from pqflow.models.heston import HestonParams
from pqflow.simulation.heston_scheme import simulate_heston_paths
from pqflow.storage.calibration_sections import heston_indices_record
from pqflow.validation.mean_tests import (
    DENSITY_DEVIATION,
    LOGNORMAL,
    ROBUST,
    CellMoments,
    mean_test,
    rule_for_density,
    unmeasured_heston_drivers,
)
from pqflow.validation.summary import FAMILY_ALPHA, family_critical_z

__all__: list[str] = []

# The demo_smile fit of the all-share (calibration.json of scenario_configs/demo_smile.toml,
# invented data): v0, kappa, theta, xi, rho and the share of its variance the Gaussian drivers explain.
FIT = HestonParams(v0=0.0291, kappa=1.064, theta=0.04215, xi=0.5445, rho=-0.548)
EXPLAINED = 0.604
PAIRS = 1000  # sampling units per simulated set (antithetic pairs)
YEARS = 10  # cells per family: the density at years 1..10
FAMILIES = 200
CHUNK = 50  # families simulated in one array
GAUSS_VAR = 0.05  # the economy's own lognormal factor: var(log) 0.05 a year


def _prices(real_world_vol):
    if real_world_vol is None:  # the demo_smile fit's own (its projection carries part of the premium)
        return HestonPricesOfRisk(equity=0.2645, variance=0.4700, kappa_real_world=FIT.kappa,
                                  theta_real_world=FIT.theta)
    return heston_prices_of_risk(kappa=FIT.kappa, theta=FIT.theta, xi=FIT.xi, equity_risk_premium=0.035,
                                 real_world_long_run_volatility=real_world_vol, rho=FIT.rho, explained=EXPLAINED)


def _densities(real_world_vol, seed: int, families: int) -> np.ndarray:
    """Correct real-world densities ``(2 * PAIRS, families * YEARS)``: column ``f * YEARS + t - 1``
    is family ``f``'s density at year ``t`` (the Heston part's exact ratio times an independent
    lognormal economy factor, both antithetic)."""
    rng = np.random.default_rng(seed)
    n = 2 * PAIRS * families
    times = np.arange(0.0, YEARS + 1.0)
    paths = simulate_heston_paths(FIT, times, rng, measure="real_world", n_paths=n, substeps=4,
                                  log_carry=np.zeros((n, YEARS)), prices_of_risk=_prices(real_world_vol),
                                  antithetic=True, explained=EXPLAINED,
                                  projection_increments=np.zeros((n, YEARS)))
    g = np.cumsum(rng.standard_normal((n // 2, YEARS)), axis=1) * np.sqrt(GAUSS_VAR)
    g = np.stack([g, -g], axis=1).reshape(n, YEARS)
    log_w = paths.log_density[:, 1:] + g - 0.5 * GAUSS_VAR * times[1:]
    w = np.exp(log_w).reshape(families, 2 * PAIRS, YEARS)
    return w.transpose(1, 0, 2).reshape(2 * PAIRS, families * YEARS)


def _verdicts(x: np.ndarray, rule: str):
    res = mean_test(CellMoments.of(x, True), 1.0, rule, deviation=DENSITY_DEVIATION)
    crit = family_critical_z(YEARS)
    failed = np.abs(res.z_score) > crit
    weak = ~(res.material_effect / res.statistic_se >= crit) & ~failed
    return failed, weak


def _parameters(real_world_vol) -> dict:
    """The calibration.json entry the check reads for this fit and house view."""
    lam = _prices(real_world_vol)
    return {"stochastic_volatility": {"veldmark_all_share": {
        "model": "heston", **FIT.as_dict(), "column": "equity_veldmark_all_share", "level": 1000.0,
        "income_yield": 0.028,
        "prices_of_risk": {"equity": lam.equity, "variance": lam.variance,
                           "kappa_real_world": lam.kappa_real_world, "theta_real_world": lam.theta_real_world},
        "loadings": [], "explained": EXPLAINED, "rates_correlation": -0.15, "substeps_per_year": 12}}}


@pytest.mark.parametrize("real_world_vol", [None, 0.20, 0.15],
                         ids=["demo_smile", "house_view_20pct", "house_view_15pct"])
def test_size_and_power_on_heston_densities(real_world_vol, report_statistic) -> None:
    """Size: the share of correct families with a false alarm, for both rules; the rule the
    density check uses for a Heston density must stay within the family level (plus 3 binomial
    SE). Power: with the density scaled by 0.9, 1.1, 0.8 and 1.2, the shares of cells that fail,
    are inconclusive and pass; a conclusive cell with a material (10%) deviation passes at most
    half the time (the power rule's promise)."""
    lam = _prices(real_world_vol)
    label = "demo_smile fit" if real_world_vol is None else f"real-world long-run vol {real_world_vol:.0%}"
    limit = FAMILY_ALPHA + 3.0 * np.sqrt(FAMILY_ALPHA * (1.0 - FAMILY_ALPHA) / FAMILIES)
    chunks = [_densities(real_world_vol, seed=100 + c, families=CHUNK) for c in range(FAMILIES // CHUNK)]
    rate = {}
    for rule in (LOGNORMAL, ROBUST):
        alarms = [_verdicts(x, rule)[0].reshape(CHUNK, YEARS).any(axis=1) for x in chunks]
        rate[rule] = float(np.concatenate(alarms).mean())
    used = rule_for_density("q_density", credit_density=False, heston_drivers=("veldmark_all_share",))
    line = report_statistic(
        f"Heston density ({label}; "
        f"prices of risk {lam.equity:.2f}, {lam.variance:.2f}), {FAMILIES} families of {YEARS} yearly cells, "
        f"{PAIRS} pairs: false alarms lognormal identity {rate[LOGNORMAL]:.3f}, robust t {rate[ROBUST]:.3f} "
        f"(nominal {FAMILY_ALPHA:.2f}, limit {limit:.3f}); the check uses the {used}")
    assert used == ROBUST
    unmeasured = unmeasured_heston_drivers(
        heston_indices_record(_parameters(real_world_vol)["stochastic_volatility"], "calibration.json"))
    line += f"; outside the measured range: {bool(unmeasured)}"
    if not unmeasured:  # within HESTON_MEASURED_SHIFT the rule judges, and holds its level
        assert rate[ROBUST] <= limit, line
    else:
        # Beyond the measured range the cells are not judged: inconclusive, with the reason.
        res = mean_test(CellMoments.of(chunks[0][:, :YEARS], True), 1.0, ROBUST, deviation=DENSITY_DEVIATION,
                        not_judged=unmeasured["veldmark_all_share"])
        assert np.all(res.z_score == 0.0) and np.all(np.isinf(res.statistic_se)), line
        assert all("not judged" in str(t) for t in res.test), line
    if real_world_vol == 0.15:
        # Measured limitation, stated in the README: with a large variance price of risk the
        # Heston part's feedback (a low index raises v, which raises the weight's own
        # volatility) gives tails heavier than the robust t's lognormal floor assumes, and its
        # low side raises false alarms too (0.245 here); the lognormal identity is far worse.
        assert rate[LOGNORMAL] > max(rate[ROBUST], limit), line
    x = chunks[0]
    for bias in (0.9, 1.1, 0.8, 1.2):
        failed, weak = _verdicts(bias * x, ROBUST)
        passed = ~failed & ~weak
        line = report_statistic(
            f"power of the robust t on Heston densities ({label}), "
            f"mean x {bias:.2f}: fail {failed.mean():.3f}, inconclusive {weak.mean():.3f}, pass {passed.mean():.3f}")
        conclusive = ~weak
        if conclusive.sum() >= 50:
            share = passed.sum() / conclusive.sum()
            assert share <= 0.5 + 3.0 * np.sqrt(0.25 / conclusive.sum()), line


def test_rule_for_density_routes_heston_columns() -> None:
    """The full density and the blocks that hold a Heston driver go to the robust t; other
    blocks stay with the lognormal identity (they carry no Heston part)."""
    assert rule_for_density("q_density", credit_density=False, heston_drivers=("x",)) == ROBUST
    assert rule_for_density("q_density", credit_density=False) == LOGNORMAL
    assert rule_for_density("p_density_rates_x", credit_density=False, block_drivers=("rates", "x"),
                            heston_drivers=("x",)) == ROBUST
    assert rule_for_density("p_density_rates", credit_density=False, block_drivers=("rates",),
                            heston_drivers=("x",)) == LOGNORMAL
    # a block whose drivers are not known is taken to carry the Heston part
    assert rule_for_density("p_density_rates", credit_density=False, heston_drivers=("x",)) == ROBUST
    assert rule_for_density("q_density_credit_AA", credit_density=False) == ROBUST
