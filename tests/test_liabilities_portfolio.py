"""The portfolio file, decrements and the bond interpolation.

References used below:
- Makeham's law ``mu_x = A + B c^x`` and its survival function
  ``t p_x = exp(-A t - B c^x (c^t - 1) / ln c)`` (Dickson, Hardy and Waters, *Actuarial
  Mathematics for Life Contingent Risks*, ch. 2, from memory), checked against
  ``scipy.integrate.quad`` of the force of mortality.
- Linear interpolation: ``numpy.interp`` (reference implementation) on log bond prices.
- Bad input must be refused with a message naming the file and the model point (common
  practice for input validation; the issue asks for it).
"""

from __future__ import annotations

import copy
import math

import numpy as np
import pytest
from conftest import write_toml
from scipy.integrate import quad

from pqflow.calibration import assemble_calibration
from pqflow.config import load_config
from pqflow.errors import PqflowError
from pqflow.jobs import generate_part, plan_run, write_calibration
from pqflow.liabilities import (
    GompertzMakeham,
    LiabilityDataError,
    check_portfolio_against_run,
    inspect_run,
    load_portfolio,
    parse_portfolio,
    value_run,
)
from pqflow.liabilities.decrements import decrement_table, survival_curve
from pqflow.liabilities.scenarios import BondInterpolation, whole_year_indices

__all__: list[str] = []

HEAD = {"insurer": "Larkspur Mutual Life (invented)", "currency": "VMK"}
GOOD_UL = {"id": "UL-A", "product": "unit_linked_gmmb", "policies": 10, "age": 40, "term": 5,
           "mortality": "none", "premium": 1000.0, "guarantee": 1000.0}
GOOD_GAO = {"id": "GAO-A", "product": "deferred_annuity_gao", "policies": 5, "age": 60, "term": 5,
            "mortality": "none", "accumulation": "fixed", "sum_at_retirement": 1000.0,
            "guaranteed_annuity_rate": 0.1, "annuity_term": 5}


def _parse(*points, **tables):
    return parse_portfolio({"portfolio": HEAD, **tables, "model_point": list(points)}, source="book.toml")


@pytest.fixture(scope="module")
def small_run(tmp_path_factory):
    """10 years, bonds 1..5, 200 scenarios a set, flat 3% curve."""
    flat = [1.0, 10.0, 20.0, 30.0]
    data = {
        "run": {"name": "liab-small", "valuation_date": "2025-01-15"},
        "curve": {"kind": "zero_rates", "compounding": "continuous", "maturities": flat,
                  "values": [0.03] * 4},
        "hull_white": {"mean_reversion": 0.05, "volatility": 0.01},
        "equity": {"name": "idx", "level": 100.0, "dividend_yield": 0.0, "volatility": 0.2,
                   "correlation_with_rates": 0.0},
        "real_world": {"rates_market_price_of_risk": 0.1, "equity_risk_premium": 0.03},
        "simulation": {"scenarios": 200, "horizon_years": 10, "steps_per_year": 1, "seed": 5,
                       "batch_size": 100, "antithetic": False},
        "outputs": {"bond_maturities": [1, 2, 3, 4, 5]},
    }
    root = tmp_path_factory.mktemp("liab-small")
    cfg = load_config(write_toml(root / "run.toml", copy.deepcopy(data)))
    cal, plan = assemble_calibration(cfg), plan_run(cfg)
    out = root / "run"
    out.mkdir()
    write_calibration(out, cal)
    for measure, batch in plan.tasks():
        generate_part(cal, plan, measure, batch, out)
    return out


# --- bad rows -------------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("edit", "pattern"),
    [
        ({"premium": -1000.0}, r"model point 2 \(id 'UL-BAD'\): premium = -1000 is negative"),
        ({"guarantee": -5.0}, r"model point 2 \(id 'UL-BAD'\): guarantee = -5 is negative"),
        ({"product": "variable_annuity_glwb"},
         r"model point 2 \(id 'UL-BAD'\): unknown product type 'variable_annuity_glwb'"),
        ({"premium": None}, r"model point 2 \(id 'UL-BAD'\): missing field 'premium'"),
        ({"term": 7.5}, r"model point 2 \(id 'UL-BAD'\): term = 7.5 must be a whole number"),
        ({"mortality": "cmi_2099"}, r"model point 2 \(id 'UL-BAD'\): mortality = 'cmi_2099' names no mortality table"),
        ({"fund_charg": 0.01}, r"model point 2 \(id 'UL-BAD'\): unknown field\(s\) 'fund_charg'"),
        ({"policies": 0}, r"model point 2 \(id 'UL-BAD'\): policies = 0 must be > 0"),
        ({"id": "UL-A"}, r"model point 2 \(id 'UL-A'\): id 'UL-A' repeats model point 1"),
    ],
)
def test_bad_rows_are_refused_naming_the_row(edit, pattern):
    bad = {**GOOD_UL, "id": "UL-BAD", **edit}
    bad = {k: v for k, v in bad.items() if v is not None}
    with pytest.raises(LiabilityDataError, match=rf"^book\.toml: {pattern}"):
        _parse(GOOD_UL, bad)


def test_negative_sum_assured_and_bad_mix_in_other_products():
    with pytest.raises(LiabilityDataError, match=r"model point 1 \(id 'GAO-A'\): sum_at_retirement = -1 is negative"):
        _parse({**GOOD_GAO, "sum_at_retirement": -1.0})
    par = {"id": "WP-A", "product": "participating", "policies": 1, "age": 40, "term": 5,
           "mortality": "none", "premium": 100.0, "guaranteed_rate": 0.01, "bonus_share": 0.9,
           "equity_share": 0.5, "cash_share": 0.4}
    with pytest.raises(LiabilityDataError, match=r"model point 1 \(id 'WP-A'\): .*must sum to 1"):
        _parse(par)
    with pytest.raises(LiabilityDataError, match=r"id 'WP-A'\): missing field 'bond_maturity'"):
        _parse({**par, "cash_share": 0.0, "bond_share": 0.5})


def test_missing_file_and_bad_toml_name_the_file(tmp_path):
    with pytest.raises(LiabilityDataError, match="nowhere.toml: liability portfolio file not found"):
        load_portfolio(tmp_path / "nowhere.toml")
    broken = tmp_path / "broken.toml"
    broken.write_text("[portfolio\ninsurer = 1\n")
    with pytest.raises(LiabilityDataError, match="broken.toml: not valid TOML"):
        load_portfolio(broken)
    assert issubclass(LiabilityDataError, PqflowError)  # the CLI turns it into exit code 2


def test_retirement_beyond_horizon_and_short_bonds_are_refused(small_run, tmp_path):
    info = inspect_run(small_run)
    assert info.last_whole_year == 10 and info.bond_maturities == (1, 2, 3, 4, 5)
    late = _parse(GOOD_UL, {**GOOD_GAO, "term": 12})
    with pytest.raises(LiabilityDataError,
                       match=r"model point 2 \(id 'GAO-A'\): retirement at year 12 lies beyond the scenario horizon of "
                             r"10 years"):
        check_portfolio_against_run(late, info)
    mature = _parse({**GOOD_UL, "term": 11})
    with pytest.raises(LiabilityDataError, match=r"id 'UL-A'\): maturity at year 11 lies beyond"):
        value_run(small_run, mature, "market_consistent")
    # The annuity needs P(T, T+8) but the files stop at 5 years and no extrapolation is allowed.
    long_annuity = _parse({**GOOD_GAO, "annuity_term": 8})
    with pytest.raises(LiabilityDataError,
                       match=r"id 'GAO-A'\): the annuity factor at retirement needs bond prices 8 years to run.*allows "
                             r"5 years"):
        check_portfolio_against_run(long_annuity, info)
    allowed = parse_portfolio(
        {"portfolio": HEAD, "valuation": {"bond_extrapolation_years": 3},
         "model_point": [{**GOOD_GAO, "annuity_term": 8}]}, source="book.toml")
    assert check_portfolio_against_run(allowed, info) is None  # fixed sum: no equity needed
    # A whole file, read from disk, with the error naming that file.
    path = tmp_path / "late.toml"
    path.write_text(
        '[portfolio]\ninsurer = "Larkspur Mutual Life (invented)"\ncurrency = "VMK"\n'
        '[[model_point]]\nid = "UL-9"\nproduct = "unit_linked_gmmb"\npolicies = 1\nage = 30\n'
        'term = 40\nmortality = "none"\npremium = 1.0\nguarantee = 1.0\n'
    )
    with pytest.raises(LiabilityDataError, match=r"late\.toml: model point 1 \(id 'UL-9'\): maturity at year 40"):
        value_run(small_run, path, "real_world")


# --- decrements -----------------------------------------------------------------------------

def test_gompertz_makeham_survival_matches_quadrature():
    law = GompertzMakeham(name="x", a=0.0002, b=0.000005, c=1.12)
    curve = survival_curve(law, 63.0, 30)
    for k in (1, 7, 30):
        hazard, _ = quad(lambda s: law.a + law.b * law.c ** (63.0 + s), 0.0, k)  # scipy quad
        assert curve[k] == pytest.approx(math.exp(-hazard), rel=1e-12)


def test_decrement_table_adds_up():
    # Every policy at time 0 either dies, lapses or reaches maturity (common practice: the
    # multiple-decrement table is a partition); lapses happen at year ends before maturity.
    law = GompertzMakeham(name="x", a=0.001, b=0.00002, c=1.1)
    dec = decrement_table(law, 0.05, 50.0, 12)
    assert dec.deaths.sum() + dec.lapses.sum() + dec.in_force[-1] == pytest.approx(1.0, rel=1e-14)
    assert dec.lapses[-1] == 0.0 and dec.deaths[0] == 0.0
    one_year = math.exp(-(law.a + law.b * law.c**50 * (law.c - 1.0) / math.log(law.c)))
    assert dec.deaths[1] == pytest.approx(1.0 - one_year, rel=1e-12)  # Makeham one-year q_50
    assert dec.lapses[1] == pytest.approx(one_year * 0.05, rel=1e-12)


# --- bond interpolation and the grid --------------------------------------------------------

def test_log_linear_bond_interpolation_matches_numpy_interp():
    written = (1.0, 2.0, 5.0, 10.0, 20.0)
    log_p = -0.03 * np.array(written) - 0.001 * np.array(written) ** 1.5
    interp = BondInterpolation(written=written, max_extrapolation=10.0)
    targets = np.array([0.0, 0.5, 1.0, 3.0, 7.5, 20.0])
    got = interp.weights(targets) @ log_p
    expected = np.interp(targets, np.concatenate(([0.0], written)), np.concatenate(([0.0], log_p)))
    assert np.allclose(got, expected, rtol=0, atol=1e-15)  # numpy.interp
    # Beyond the longest: the last segment's forward continued (flat forward), up to 30 years.
    slope = (log_p[-1] - log_p[-2]) / (written[-1] - written[-2])
    assert interp.weights([26.0]) @ log_p == pytest.approx(log_p[-1] + 6.0 * slope, rel=1e-14)
    with pytest.raises(ValueError, match="outside what the files support"):
        interp.weights([30.5])


def test_whole_years_on_a_sub_annual_grid():
    times = np.arange(0, 41) / 4.0  # quarterly to 10 years
    idx = whole_year_indices(times, 10)
    assert np.array_equal(times[idx], np.arange(11.0))
    with pytest.raises(ValueError, match="whole year"):
        whole_year_indices(times, 11)


def test_a_folder_that_is_not_a_run_is_refused(tmp_path):
    from pqflow.errors import RunDirectoryError

    with pytest.raises(RunDirectoryError, match="not a pqflow run directory"):
        value_run(tmp_path, _parse(GOOD_UL), "market_consistent")
