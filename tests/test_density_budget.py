"""The density budget (pqflow.measure.budget): each price of risk's share of the log-density
variance.

Sources named beside each check:
- the variance of a Gaussian likelihood ratio's log, ``sum_k m_k^T Sigma_k^{-1} m_k`` (common
  practice; Glasserman, *Monte Carlo Methods in Financial Engineering*, 2003, s. 4.6), against
  the engine's own exponent ``2 * half_sq_cum`` and against the sample variance of
  ``log q_density`` from a simulation;
- Girsanov's compensator: ``E_P[log dQ/dP] = -E_P[sum |eta|^2] / 2`` (any stochastic calculus
  text), with the CIR mean ``E[y_t] = mu + (y_0 - mu) e^{-kappa t}`` (Cox, Ingersoll and Ross,
  *Econometrica* 53, 1985; from memory) and the real-world drift ``kappa^P = kappa - nu theta``
  (pqflow.measure.cir_density).
Monte Carlo tolerances: 4 standard errors.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from conftest import DEMO_TYPED

from pqflow.calibration import assemble_calibration, build_model
from pqflow.config import load_config
from pqflow.measure.budget import credit_log_variance_by_rating, density_budget, gaussian_log_variance_by_driver
from pqflow.models.cir_credit import CirCreditModel, CirParams, CreditRating, HazardCurve
from pqflow.simulation.credit import simulate_credit
from pqflow.simulation.engine import grid_laws, simulate_batch


@pytest.fixture(scope="module")
def model():
    return build_model(assemble_calibration(load_config(DEMO_TYPED)), ())


TIMES = np.arange(0.0, 21.0)


def test_gaussian_total_is_the_engines_exponent(model):
    # Var(log w_t) = sum_k |eta_k|^2 = 2 * half_sq_cum (the engine's exponent); the Euler split
    # adds up to it exactly.
    parts = gaussian_log_variance_by_driver(model, TIMES)
    assert len(parts) >= 2  # rates and equity are both priced in the typed demo
    total = sum(parts.values())
    assert np.allclose(total, 2.0 * grid_laws(model, TIMES).half_sq_cum, rtol=1e-10, atol=1e-14)
    table = density_budget(model, None, {"real_world": TIMES})
    sums = table.groupby("time")["share"].sum()
    assert np.allclose(sums.to_numpy(), 1.0, atol=1e-12)


def test_gaussian_total_against_the_sample_variance_of_log_q_density(model):
    # The sample variance of log q_density from 20,000 independent real-world paths within 4
    # standard errors (sd of a Gaussian sample variance: v sqrt(2 / (n - 1))) of the budget's
    # total, at 5, 10 and 20 years.
    n = 20_000
    cols = simulate_batch(model, TIMES, measure="real_world", n_paths=n, rng=np.random.default_rng(7),
                          antithetic=False, columns=["short_rate"])
    total = sum(gaussian_log_variance_by_driver(model, TIMES).values())
    for t in (5, 10, 20):
        sample = np.log(cols["q_density"][:, t]).var(ddof=1)
        assert abs(sample - total[t]) < 4 * total[t] * np.sqrt(2 / (n - 1)), (t, sample, total[t])


def test_one_priced_driver_takes_the_whole_budget(model):
    # With every price of risk but one set to zero, that one carries 100% of the variance.
    name = next(k for k in model.prices_of_risk if k not in ("rates", "rates_x", "rates_y"))
    single = replace(model, prices_of_risk={name: model.prices_of_risk[name]})
    table = density_budget(single, None, {"market_consistent": TIMES})
    assert set(table["price_of_risk"]) == {name}
    assert np.allclose(table["share"], 1.0)


def _hazard() -> HazardCurve:
    return HazardCurve(knots=np.array([1.0, 5.0]), hazards=np.array([0.02, 0.025]))


@pytest.mark.parametrize("measure", ["real_world", "market_consistent"])
def test_credit_budget_is_the_compensator_of_the_simulated_density(measure):
    # E[log w] = -E[sum |eta|^2] / 2 under the set's own measure (Girsanov's compensator), so
    # minus twice the mean log credit density of a simulation must match the budget's
    # expected quadratic variation (two correlated ratings, one priced; 4 standard errors).
    cir = CirParams(mean_reversion=0.3, long_run_mean=0.03, volatility=0.08, initial=0.012)
    priced = CreditRating(name="BBB", cir=cir, hazard=_hazard(), recovery=0.4, price_of_risk=-1.0)
    other = CreditRating(name="AA", cir=replace(cir, long_run_mean=0.01, initial=0.004), hazard=_hazard(),
                         recovery=0.4, price_of_risk=0.0)
    credit = CirCreditModel(ratings=(priced, other), bond_maturities=(1.0,), correlation=np.array([[1.0, 0.6], [0.6,
                                                                                                                1.0]]))
    times = np.arange(0.0, 21.0)
    paths = simulate_credit(credit, times, np.random.default_rng(5), measure=measure, n_paths=10_000, substeps=12,
                            risk_free=None)
    log_w = np.log(paths.density)
    budget = credit_log_variance_by_rating(credit, times, measure=measure)
    assert set(budget) == {"credit_BBB"}
    for t in (5, 10, 20):
        est = -2.0 * log_w[:, t].mean()
        se = 2.0 * log_w[:, t].std(ddof=1) / np.sqrt(log_w.shape[0])
        assert abs(est - budget["credit_BBB"][t]) < 4 * se + 0.01 * budget["credit_BBB"][t], (t, est,
                                                                                              budget["credit_BBB"][t])


def test_budget_rows_are_those_of_the_table(model):
    table = density_budget(model, None, {"real_world": TIMES, "market_consistent": TIMES[:11]})
    assert list(table.columns) == ["measure", "time", "price_of_risk", "log_variance", "share"]
    assert table[table["measure"] == "market_consistent"]["time"].max() == 10.0
    assert (table["time"] > 0).all()
