"""Configuring the further parts (indices, inflation, credit): clear errors for a model without
its data or data without its model, exact repricing of the inputs, and the calibration record
rebuilt without refitting."""

from __future__ import annotations

import copy
from pathlib import Path

import numpy as np
import pytest
from conftest import write_toml

from pqflow.calibration.assemble import assemble_calibration, build_model, load_calibration
from pqflow.config.loader import load_config
from pqflow.errors import ConfigError, MarketDataError
from pqflow.models.cir_credit import zero_spread
from pqflow.models.jarrow_yildirim import zciis_rate

INDICES = [
    {"name": "world_equity", "kind": "equity", "level": 850.0, "income_yield": 0.019, "volatility": 0.18,
     "risk_premium": 0.04},
    {"name": "veldmark_property", "kind": "property", "level": 500.0, "income_yield": 0.042, "volatility": 0.11,
     "risk_premium": 0.025},
]
DRIVERS = ["rates", "veldmark_all_share", "world_equity", "veldmark_property", "real_rate", "inflation"]
MATRIX = [  # invented, positive definite (eigenvalues 0.22 .. 2.21)
    [1, -0.15, -0.10, -0.20, 0.55, 0.15],
    [-0.15, 1, 0.75, 0.45, -0.10, -0.05],
    [-0.10, 0.75, 1, 0.35, -0.05, 0.00],
    [-0.20, 0.45, 0.35, 1, -0.15, 0.25],
    [0.55, -0.10, -0.05, -0.15, 1, -0.30],
    [0.15, -0.05, 0.00, 0.25, -0.30, 1],
]
INFLATION = {
    "real_mean_reversion": 0.08, "real_volatility": 0.007, "inflation_volatility": 0.012,
    "cpi_base": 100.0, "real_bond_maturities": [5, 10],
    "swap_maturities": [1, 2, 5, 10, 20, 30], "swap_rates": [0.0231, 0.0224, 0.0214, 0.0211, 0.0215, 0.0218],
}
CREDIT = {
    "bond_maturities": [1, 5, 10],
    "substeps_per_year": 12,
    "ratings": [
        {"name": "AA", "recovery": 0.4, "mean_reversion": 0.4, "long_run_mean": 0.01, "volatility": 0.05,
         "initial": 0.004, "fit": ["long_run_mean", "initial"], "spread_maturities": [1, 3, 5, 10], "spreads_bp": [28,
                                                                                                                   36,
                                                                                                                   43,
                                                                                                                   56]},
        {"name": "BBB", "recovery": 0.4, "mean_reversion": 0.3, "long_run_mean": 0.03, "volatility": 0.08,
         "initial": 0.012, "fit": ["long_run_mean", "initial"], "price_of_risk": 0.5,
         "spread_maturities": [1, 3, 5, 10], "spreads_bp": [95, 119, 136, 162]},
    ],
}


@pytest.fixture
def full(demo_config_dict):
    """The typed demo with the whole invented balance sheet typed in."""
    data = copy.deepcopy(demo_config_dict)
    del data["equity"]["correlation_with_rates"]
    data["indices"] = copy.deepcopy(INDICES)
    data["correlations"] = {"drivers": DRIVERS, "matrix": MATRIX}
    data["inflation"] = copy.deepcopy(INFLATION)
    data["credit"] = copy.deepcopy(CREDIT)
    data["simulation"].update({"scenarios": 400, "batch_size": 200, "horizon_years": 10})
    data["real_world"]["target_year"] = 10
    return data


def _load(tmp_path: Path, data: dict):
    return load_config(write_toml(tmp_path / "q.toml", data))


def test_full_balance_sheet_calibrates_and_reprices_its_inputs(tmp_path, full):
    cal = assemble_calibration(_load(tmp_path, full))
    # ZCIIS: k(T) = (P_r / P_n)^{1/T} - 1 reprices every quote (Brigo and Mercurio 2006, ch. 15.2)
    t = np.array(INFLATION["swap_maturities"], float)
    k = zciis_rate(cal.curve, cal.inflation.real_curve, t)
    assert np.max(np.abs(k - np.array(INFLATION["swap_rates"]))) < 1e-12
    # beyond the last quote the breakeven is held flat (common practice)
    assert zciis_rate(cal.curve, cal.inflation.real_curve, np.array([45.0, 80.0])) == pytest.approx([0.0218] * 2,
                                                                                                    abs=1e-12)
    # every spread repriced by the CIR++ shift (Brigo and Mercurio 2006, ch. 3.9; exact fit)
    for rating, spec in zip(cal.credit.ratings, CREDIT["ratings"], strict=True):
        mats = np.array(spec["spread_maturities"], float)
        model = zero_spread(rating, 0.0, mats, rating.cir.initial)
        assert np.max(np.abs(model - np.array(spec["spreads_bp"]) * 1e-4)) < 1e-12
    assert cal.credit.ratings[1].price_of_risk == 0.5
    # prices of risk: risk premium over volatility per index; inflation drift adjustment / vol
    assert cal.extra_prices_of_risk["world_equity"] == pytest.approx(0.04 / 0.18)
    assert cal.extra_prices_of_risk["inflation"] == 0.0
    model = build_model(cal, (1.0, 5.0, 10.0))
    assert model.driver_names == tuple(DRIVERS)
    assert np.array_equal(model.correlation, np.array(MATRIX, float))
    assert "property_veldmark_property" in model.known_columns() and "real_zcb_10y" in model.known_columns()


def test_the_calibration_record_rebuilds_every_part(tmp_path, full):
    cal = assemble_calibration(_load(tmp_path, full))
    from pqflow.jobs.steps import write_calibration

    path = write_calibration(tmp_path, cal)
    again = load_calibration(path)
    assert again.to_json() == cal.to_json()
    times = np.linspace(0.0, 10.0, 11)
    a, b = build_model(cal, (5.0,)), build_model(again, (5.0,))
    for t0, t1 in zip(times[:-1], times[1:], strict=True):
        la, lb = a.step_law(t0, t1), b.step_law(t0, t1)
        assert np.array_equal(la.chol, lb.chol) and np.array_equal(la.drift, lb.drift)
        assert np.array_equal(la.real_world_shift, lb.real_world_shift)


@pytest.mark.parametrize(
    ("edit", "fragment"),
    [
        (lambda d: d.setdefault("market_data", {}).update(inflation_swaps="x.csv") or d.pop("inflation"),
         "market_data.inflation_swaps is given but [inflation] is not configured"),
        (lambda d: d.setdefault("market_data", {}).update(credit_spreads="x.csv") or d.pop("credit"),
         "market_data.credit_spreads is given but [credit] is not configured"),
        (lambda d: [d["inflation"].pop(k) for k in ("swap_maturities", "swap_rates")],
         "inflation.swap_maturities/swap_rates (typed in) or market_data.inflation_swaps"),
        (lambda d: [d["credit"]["ratings"][0].pop(k) for k in ("spread_maturities", "spreads_bp")],
         "credit rating AA: give exactly one of spread_maturities/spreads_bp"),
        (lambda d: [d["indices"][0].pop(k) for k in ("level", "income_yield")],
         "index world_equity: give level and income_yield, or market_data.equity_index"),
        (lambda d: d["indices"][1].pop("volatility"),
         "index veldmark_property: give volatility, or market_data.equity_vols"),
        (lambda d: d["credit"].update(bond_maturities=[1, 11]),
         "credit.bond_maturities [11.0] are not in outputs.bond_maturities"),
        (lambda d: d.pop("correlations") and d["equity"].update(correlation_with_rates=-0.1),
         "every pair of drivers needs a correlation"),
        (lambda d: d["indices"][0].update(name="veldmark_all_share"), "index names must not repeat"),
        (lambda d: d["indices"][0].update(name="inflation"), "names a rates or inflation driver"),
        (lambda d: d.setdefault("market_data", {}).update(inflation_caps="caps.csv"),
         "market_data.inflation_caps is given but nothing is fitted to it"),
        (lambda d: d["inflation"].update(fit=["inflation_volatility"]),
         "inflation.fit needs year-on-year cap or floor quotes"),
    ],
)
def test_a_model_without_its_data_or_data_without_its_model_is_refused(tmp_path, full, edit, fragment):
    data = copy.deepcopy(full)
    edit(data)
    with pytest.raises(ConfigError) as info:
        _load(tmp_path, data)
    assert fragment in " ".join(str(info.value).split())


def test_a_correlation_matrix_missing_a_driver_names_it(tmp_path, full):
    data = copy.deepcopy(full)
    data["correlations"] = {"drivers": DRIVERS[:-1], "matrix": [row[:-1] for row in MATRIX[:-1]]}
    with pytest.raises(MarketDataError, match="'inflation' not in the matrix"):
        assemble_calibration(_load(tmp_path, data))


def test_a_stored_calibration_must_match_the_configured_parts(tmp_path, full):
    from pqflow.calibration.assemble import check_calibration_fits

    cal = assemble_calibration(_load(tmp_path, full))
    data = copy.deepcopy(full)
    data.pop("credit")
    with pytest.raises(ConfigError, match=r"has \[credit\] part but the configuration does not configure it"):
        check_calibration_fits(cal, _load(tmp_path, data), source="cal.json")
    data = copy.deepcopy(full)
    data["indices"] = data["indices"][:1]
    with pytest.raises(ConfigError, match="calibration has indices"):
        check_calibration_fits(cal, _load(tmp_path, data), source="cal.json")


@pytest.fixture(scope="module")
def full_run(tmp_path_factory, demo_config_dict):
    """A small run of the whole typed balance sheet, without Prefect (same files as the flow)."""
    from pqflow.pipeline import run_in_process

    root = tmp_path_factory.mktemp("full")
    data = copy.deepcopy(demo_config_dict)
    del data["equity"]["correlation_with_rates"]
    data.update(indices=copy.deepcopy(INDICES), correlations={"drivers": DRIVERS, "matrix": MATRIX},
                inflation=copy.deepcopy(INFLATION), credit=copy.deepcopy(CREDIT))
    data["simulation"].update({"scenarios": 2000, "batch_size": 1000, "horizon_years": 10})
    data["real_world"]["target_year"] = 10
    cfg = write_toml(root / "full.toml", data)
    out = root / "run"
    result = run_in_process(cfg, out)
    return out, result


def _read(run: Path, measure: str):
    import pandas as pd

    return pd.concat([pd.read_parquet(p) for p in sorted((run / "scenarios" / measure).glob("part-*.parquet"))])


def test_every_part_writes_its_columns_to_both_sets(full_run):
    run, _ = full_run
    expected = {"equity_veldmark_all_share", "equity_world_equity", "property_veldmark_property", "cpi",
                "real_short_rate", "real_zcb_5y", "real_zcb_10y", "intensity_AA", "cumulative_intensity_BBB",
                "spread_BBB_10y", "dzcb_AA_1y", "dzcb_BBB_10y"}
    for measure in ("real_world", "market_consistent"):
        cols = set(_read(run, measure).columns)
        assert expected <= cols, expected - cols


def test_columns_of_parts_not_configured_are_absent(tmp_path, small_config):
    from pqflow.pipeline import run_in_process

    out = tmp_path / "core"
    run_in_process(small_config(), out, scenarios=200)
    cols = set(_read(out, "market_consistent").columns)
    assert not {c for c in cols if c.startswith(("property_", "cpi", "real_", "intensity_", "spread_", "dzcb_"))}


def test_reweighted_real_world_expectations_match_market_consistent_ones(full_run):
    """E_P[q_density X_t] = E_Q[X_t] for the new assets (Girsanov; the density of the whole set is
    the product of the Gaussian and the credit parts). Both sides are estimates: their difference
    is judged against the combined standard error, 4 SE (common practice)."""
    run, _ = full_run
    p, q = _read(run, "real_world"), _read(run, "market_consistent")
    t = 10.0
    p, q = p[p.time == t], q[q.time == t]
    for col in ("cpi", "real_zcb_10y", "property_veldmark_property", "equity_world_equity", "intensity_BBB",
                "dzcb_BBB_10y"):
        wp = (p["q_density"] * p[col]).to_numpy()
        xq = q[col].to_numpy()
        wp = wp.reshape(-1, 2).mean(axis=1)  # antithetic pairs are the sampling units
        xq = xq.reshape(-1, 2).mean(axis=1)
        se = np.sqrt(wp.var(ddof=1) / wp.size + xq.var(ddof=1) / xq.size)
        assert abs(wp.mean() - xq.mean()) <= 4 * se, (col, wp.mean(), xq.mean(), se)
    # the BBB price of risk (0.5) makes real-world intensities differ from market-consistent ones
    gap = p["intensity_BBB"].mean() - q["intensity_BBB"].mean()
    se = np.sqrt(p["intensity_BBB"].var() / len(p) + q["intensity_BBB"].var() / len(q))
    assert abs(gap) > 4 * se


def test_outputs_columns_selects_what_is_written(tmp_path, small_config):
    from pqflow.pipeline import run_in_process

    cfg = small_config(outputs={"columns": ["zcb_10y", "equity_*"]})
    run_in_process(cfg, tmp_path / "sel", scenarios=200)
    cols = list(_read(tmp_path / "sel", "real_world").columns)
    head = ["scenario", "time", "short_rate", "cash_account", "deflator", "zcb_10y",
            "equity_veldmark_all_share", "q_density"]
    assert cols[: len(head)] == head, cols
    # the restricted densities follow the full one, whatever outputs.columns selects
    assert cols[len(head):] and all(c.startswith("q_density_") for c in cols[len(head):]), cols
    assert "q_density_rates" in cols and "q_density_rates_veldmark_all_share" in cols


def test_outputs_columns_naming_nothing_is_refused_before_anything_is_written(tmp_path, small_config):
    from pqflow.pipeline import run_in_process

    cfg = small_config(outputs={"columns": ["zcb_10y", "cpi"]})
    with pytest.raises(ConfigError, match="'cpi' matches no column of the configured models"):
        run_in_process(cfg, tmp_path / "bad", scenarios=200)
    assert not (tmp_path / "bad").exists()


G2_DRIVERS = ["rates_x", "rates_y", *DRIVERS[1:]]


def _g2_matrix() -> list[list[float]]:
    """MATRIX with the rates row split into two factors (invented, positive definite): rates_y
    carries the one-factor correlations, rates_x -0.6 times them, and rho(x, y) = -0.7."""
    m = np.array(MATRIX, float)
    ry = m[0, 1:]
    out = np.eye(len(G2_DRIVERS))
    out[2:, 2:] = m[1:, 1:]
    out[1, 2:] = out[2:, 1] = ry
    out[0, 2:] = out[2:, 0] = np.round(-0.6 * ry, 2)
    out[0, 1] = out[1, 0] = -0.7
    assert np.linalg.eigvalsh(out)[0] > 0.05
    return out.tolist()


def test_g2pp_runs_the_whole_balance_sheet_and_reconciles_in_closed_form(tmp_path, demo_config_dict):
    """G2++ selected in the configuration: every check passes, the reconciliation's closed form
    is the G2++ one (Brigo and Mercurio 2006, ch. 4.2 and the equity extension of
    oracles.g2pp_equity, checked against quadrature in tests/test_g2pp_transition.py), and
    the real-world expected short rate meets the target year's rate (house view)."""
    from pqflow.pipeline import run_in_process
    from pqflow.storage.jsonio import read_json

    data = copy.deepcopy(demo_config_dict)
    del data["equity"]["correlation_with_rates"]
    del data["hull_white"]
    data.update(rates={"model": "g2pp"}, g2pp={"a": 0.6, "sigma": 0.006, "b": 0.04, "eta": 0.008, "rho": -0.7},
                indices=copy.deepcopy(INDICES), correlations={"drivers": G2_DRIVERS, "matrix": _g2_matrix()},
                inflation=copy.deepcopy(INFLATION), credit=copy.deepcopy(CREDIT))
    data["simulation"].update({"scenarios": 2000, "batch_size": 1000, "horizon_years": 10})
    data["real_world"]["target_year"] = 10
    cfg = write_toml(tmp_path / "g2.toml", data)
    result = run_in_process(cfg, tmp_path / "run")
    summary = result["summary"]
    # no check fails (cells without the power to see a material deviation are inconclusive)
    assert summary["verdict"] in ("pass", "inconclusive"), {k: v["verdict"] for k, v in summary["checks"].items()}
    assert all(v["verdict"] != "fail" for v in summary["checks"].values())
    cal = read_json(tmp_path / "run" / "calibration.json")
    assert cal["parameters"]["rates_model"] == "g2pp" and "hull_white" not in cal["parameters"]
    rec = read_json(tmp_path / "run" / "validation" / "summary.json")["checks"]["reconciliation"]
    assert not rec["warnings"]  # the closed form was found
    import pandas as pd

    table = pd.read_csv(tmp_path / "run" / "validation" / "reconciliation.csv")
    assert "closed form (G2++ + Black)" in set(table["method"])
    esr = cal["expected_short_rate"]
    k = esr["time"].index(10.0)
    assert esr["real_world"][k] == pytest.approx(data["real_world"]["target_short_rate"], abs=1e-12)


def _cap_quotes(path: Path, cal, sigma_i: float, bump: float = 1.0) -> Path:
    """Year-on-year cap/floor premiums priced by the Jarrow-Yildirim closed form (checked
    against QuantLib's YoY inflation cap engine in tests/test_jarrow_yildirim.py)."""
    from pqflow.models.jarrow_yildirim import JarrowYildirimParams, yoy_cap_price

    c = cal.driver_correlation
    p = JarrowYildirimParams(nominal=cal.rates, real=cal.inflation.real, inflation_volatility=sigma_i,
                             correlation_nominal_real=c.pair("rates", "real_rate"),
                             correlation_nominal_inflation=c.pair("rates", "inflation"),
                             correlation_real_inflation=c.pair("real_rate", "inflation"))
    rows = ["maturity_years,strike,kind,premium_bp"]
    for n in (2, 5, 8):
        for k, kind in ((0.03, "cap"), (0.01, "floor")):
            price = yoy_cap_price(cal.curve, cal.inflation.real_curve, p, maturity=n, strike=k, kind=kind)
            rows.append(f"{n},{k},{kind},{price * 1e4 * bump!r}")
    path.write_text("\n".join(rows) + "\n")
    return path


def test_inflation_volatility_is_recovered_from_year_on_year_caps(tmp_path, full):
    """Quotes priced at sigma_I = 1.35%: the fit from a 1% start recovers it (parameter
    recovery, to 1e-8), and the written run reprices every cap from its cpi column within the
    Monte Carlo interval (the market-consistency check)."""
    from pqflow.pipeline import run_in_process

    cal = assemble_calibration(_load(tmp_path, full))
    data = copy.deepcopy(full)
    data.setdefault("market_data", {})["inflation_caps"] = str(_cap_quotes(tmp_path / "caps.csv", cal, 0.0135))
    data["inflation"].update(inflation_volatility=0.01, fit=["inflation_volatility"])
    fitted = assemble_calibration(_load(tmp_path, data))
    assert fitted.inflation.inflation_volatility == pytest.approx(0.0135, rel=1e-8)
    assert fitted.fit["inflation"]["caps"]["price_rmse_bp"] < 1e-6
    assert len(fitted.instruments["inflation_caps"]) == 6
    result = run_in_process(write_toml(tmp_path / "caps.toml", data), tmp_path / "run")
    mc = result["summary"]["checks"]["market_consistency"]
    assert mc["verdict"] in ("pass", "inconclusive") and mc["max_abs_z"] <= mc["family_critical_z"]
    import pandas as pd

    table = pd.read_csv(tmp_path / "run" / "validation" / "market_consistency.csv")
    assert (table["type"] == "yoy_option").sum() == 12  # 6 quotes x 2 sets


def test_a_mispriced_cap_quote_fails_market_consistency(tmp_path, full):
    """A recorded premium 25% above what the scenarios give: a planted defect the check exists
    to catch (the other quotes still pass)."""
    import json

    from pqflow.pipeline import run_in_process
    from pqflow.validation.market_consistency import market_consistency_check
    from pqflow.validation.run_files import load_run_inputs

    cal = assemble_calibration(_load(tmp_path, full))
    data = copy.deepcopy(full)
    data.setdefault("market_data", {})["inflation_caps"] = str(_cap_quotes(tmp_path / "caps.csv", cal, 0.012))
    data["inflation"].update(fit=["inflation_volatility"])
    run_in_process(write_toml(tmp_path / "q.toml", data), tmp_path / "run")
    path = tmp_path / "run" / "calibration.json"
    record = json.loads(path.read_text())
    record["instruments"]["inflation_caps"][2]["market_price"] *= 1.25  # the 5-year cap
    path.write_text(json.dumps(record))
    check = market_consistency_check(load_run_inputs(tmp_path / "run"))
    assert check.summary["verdict"] == "fail"
    table = check.tables["market_consistency"]
    worst = table.loc[table["z_score"].abs().idxmax(), "instrument"]
    assert worst == "year-on-year inflation cap 5y K=3.00%"


def test_a_real_world_long_run_intensity_sets_the_price_of_risk(tmp_path, full):
    """kappa^P = kappa mu / mu^P and theta = (kappa - kappa^P) / nu (the CIR drift under the
    change of measure W^Q = W^P + int theta sqrt(y) ds; Brigo and Mercurio 2006, ch. 3.2, chapter
    from memory)."""
    from pqflow.models.cir_credit import real_world_cir

    data = copy.deepcopy(full)
    data["credit"]["ratings"][1].pop("price_of_risk")
    data["credit"]["ratings"][1]["real_world_long_run_mean"] = 0.02
    cal = assemble_calibration(_load(tmp_path, data))
    bbb = cal.credit.ratings[1]
    q = bbb.cir
    assert real_world_cir(bbb).long_run_mean == pytest.approx(0.02, rel=1e-12)
    assert bbb.price_of_risk == pytest.approx(
        (q.mean_reversion - q.mean_reversion * q.long_run_mean / 0.02) / q.volatility, rel=1e-12)
    data["credit"]["ratings"][1]["price_of_risk"] = 0.3
    with pytest.raises(ConfigError, match="at most one of price_of_risk and real_world_long_run_mean"):
        _load(tmp_path, data)


def _with_credit_drivers(full: dict, cross: float = 0.0, rho: float = 0.6, names=("credit_AA", "credit_BBB")) -> dict:
    data = copy.deepcopy(full)
    m = np.eye(len(DRIVERS) + len(names))
    m[: len(DRIVERS), : len(DRIVERS)] = np.array(MATRIX, float)
    if len(names) == 2:
        m[-1, -2] = m[-2, -1] = rho
    m[0, len(DRIVERS)] = m[len(DRIVERS), 0] = cross
    data["correlations"] = {"drivers": [*DRIVERS, *names], "matrix": m.tolist()}
    return data


def test_ratings_correlate_through_the_matrix_and_stay_independent_of_market_drivers(tmp_path, full):
    """The ratings' drivers take their correlation from the matrix; their simulated Euler
    increments correlate as configured (Fisher-z interval at 99%, common practice); a non-zero
    entry against a market driver, or naming only some ratings, is refused."""
    from pqflow.simulation.credit import simulate_credit

    cal = assemble_calibration(_load(tmp_path, _with_credit_drivers(full)))
    assert np.array_equal(cal.credit.correlation, np.array([[1.0, 0.6], [0.6, 1.0]]))
    again = load_calibration(__import__("pqflow.jobs.steps", fromlist=["x"]).write_calibration(tmp_path, cal))
    assert np.array_equal(again.credit.correlation, cal.credit.correlation)
    n = 20_000
    paths = simulate_credit(cal.credit, np.array([0.0, 1.0 / 365.0]), np.random.default_rng(5),
                            measure="market_consistent",
                            n_paths=n, substeps=1)
    dy = paths.factor[:, 1, :] - paths.factor[:, 0, :]
    r = np.corrcoef(dy.T)[0, 1]
    assert abs(np.arctanh(r) - np.arctanh(0.6)) <= norm_ppf(0.995) / np.sqrt(n - 3)
    with pytest.raises(MarketDataError, match="credit intensities are independent of rates"):
        assemble_calibration(_load(tmp_path, _with_credit_drivers(full, cross=0.2)))
    with pytest.raises(MarketDataError, match="name every rating's driver"):
        assemble_calibration(_load(tmp_path, _with_credit_drivers(full, names=("credit_AA",))))


def norm_ppf(p: float) -> float:
    from scipy.stats import norm

    return float(norm.ppf(p))


def test_a_stored_calibration_must_be_for_the_configured_rates_model(tmp_path, full):
    from pqflow.calibration.assemble import check_calibration_fits

    cal = assemble_calibration(_load(tmp_path, full))
    data = copy.deepcopy(full)
    del data["hull_white"]
    data.update(rates={"model": "g2pp"}, g2pp={"a": 0.6, "sigma": 0.006, "b": 0.04, "eta": 0.008, "rho": -0.7},
                correlations={"drivers": G2_DRIVERS, "matrix": _g2_matrix()})
    with pytest.raises(ConfigError,
                       match="calibration is for rates model 'hull_white' but the configuration names 'g2pp'"):
        check_calibration_fits(cal, _load(tmp_path, data), source="cal.json")
    assert assemble_calibration(_load(tmp_path, data)).inputs_hash != cal.inputs_hash


def test_the_benchmark_configuration_is_the_standard_two_driver_model(tmp_path):
    """make bench measures the issue's standard model (Hull-White + one equity) on the demo's
    market data; the demo's further parts must be cut out cleanly (common practice: benchmark
    what the target names)."""
    import importlib.util

    from conftest import REPO

    spec = importlib.util.spec_from_file_location("bench_run", REPO / "benchmarks" / "run.py")
    bench = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(bench)
    cfg = load_config(bench.make_config(tmp_path / "b.toml", scenarios=1000))
    assert cfg.indices == [] and cfg.inflation is None and cfg.credit is None
    assert cfg.simulation.scenarios == 1000


def test_outputs_columns_keep_what_the_claims_need(tmp_path, full):
    """Real bonds are tested in currency (cpi x real bond) and defaultable bonds with their
    default losses exp(-L Lambda): choosing one without the other is refused up front."""
    from pqflow.jobs.steps import plan_run, written_columns

    cal = assemble_calibration(_load(tmp_path, full))
    for columns, fragment in ((["real_zcb_*"], "real bonds need 'cpi'"),
                              (["dzcb_AA_*"], "needs 'cumulative_intensity_AA'")):
        data = copy.deepcopy(full)
        data["outputs"]["columns"] = columns
        with pytest.raises(ConfigError, match=fragment):
            written_columns(cal, plan_run(_load(tmp_path, data)))
    data = copy.deepcopy(full)
    data["outputs"]["columns"] = ["cpi", "real_zcb_*", "dzcb_AA_*", "cumulative_intensity_AA"]
    assert "dzcb_AA_10y" in written_columns(cal, plan_run(_load(tmp_path, data)))


def test_whole_balance_sheet_writes_every_default_density_block(full_run):
    """Default blocks (rates, rates_<index>, rates_inflation, credit_<rating>) in both sets;
    the structure checked before fitting equals the built model's (inflation and credit
    included); every block's weights average to 1 within 4 SE (common practice) and are less
    spread than the full density (conditioning: Jensen)."""
    from pqflow.calibration.assemble import build_model, load_calibration
    from pqflow.config.loader import load_config
    from pqflow.jobs.steps import plan_run
    from pqflow.measure.blocks import economy_structure, model_structure
    from pqflow.simulation.scenarios import block_layout

    run, _ = full_run
    cfg = load_config(run.parent / "full.toml")
    plan = plan_run(cfg)
    names = [b.name for b in plan.density_blocks]
    assert names[0] == "rates" and "rates_inflation" in names and any(n.startswith("credit_") for n in names)
    cal = load_calibration(run / "calibration.json")
    model = build_model(cal, plan.bond_maturities)
    ratings = {r: f"credit_{r}" for r in cal.credit.names}
    built = model_structure(model.state_names, model.state_drivers(), model.step_laws(np.array([0.0, 1.0])).transition,
                            ratings)
    indices = [(p.name, p.column) for p in model.indices]
    assert built == economy_structure(("rates",), indices, ("real_rate", "inflation"), ratings)
    assert set(block_layout(model, cal.credit, plan.density_blocks)) == set(names)
    for measure, full in (("real_world", "q_density"), ("market_consistent", "p_density")):
        df = _read(run, measure)
        last = df[df.time == df.time.max()]
        for b in names:
            w = last[f"{full}_{b}"].to_numpy()
            pairs = w.reshape(-1, 2).mean(axis=1)
            assert abs(pairs.mean() - 1.0) <= 4 * pairs.std(ddof=1) / np.sqrt(pairs.size), (measure, b)
            assert np.log(w).var() <= np.log(last[full].to_numpy()).var() + 1e-12, (measure, b)


def test_density_blocks_are_configured_by_name_and_drivers(tmp_path, small_config):
    """[density_blocks] replaces the default blocks; a block that is not autonomous, or names an
    unknown driver, is refused before anything is fitted, naming the state or the driver."""
    from pqflow.calibration import assemble
    from pqflow.config.loader import load_config
    from pqflow.jobs.steps import plan_run
    from pqflow.pipeline import run_in_process

    cfg = small_config(density_blocks={"core": ["rates", "veldmark_all_share"], "curve": ["rates"]})
    assert [(b.name, b.drivers) for b in plan_run(load_config(cfg)).density_blocks] == [
        ("core", ("rates", "veldmark_all_share")), ("curve", ("rates",))]
    run_in_process(cfg, tmp_path / "blocks", scenarios=200)
    cols = list(_read(tmp_path / "blocks", "market_consistent").columns)
    assert cols[-3:] == ["p_density", "p_density_core", "p_density_curve"]

    def fitting_is_forbidden(*a, **k):
        raise AssertionError("fitted before the blocks were checked")

    for blocks, message in (
        ({"eq": ["veldmark_all_share"]}, r"density_blocks: density block 'eq' is not autonomous: state "
                                         r"'log_equity_veldmark_all_share' of driver 'veldmark_all_share' also moves"),
        ({"x": ["rates", "gold"]}, r"density_blocks: density block 'x': unknown driver\(s\) 'gold'"),
        ({"Bad-name": ["rates"]}, r"block name 'Bad-name'"),
    ):
        with pytest.raises(ConfigError, match=message):
            cfg = small_config(name="bad.toml", density_blocks=blocks)
            original = assemble.assemble_calibration
            assemble.assemble_calibration = fitting_is_forbidden
            try:
                plan_run(load_config(cfg))
            finally:
                assemble.assemble_calibration = original
    empty = small_config(name="none.toml", density_blocks={})
    assert plan_run(load_config(empty)).density_blocks == ()


def test_a_further_index_is_valued_by_name_as_the_core_one_is(full_run):
    """Liabilities and the guarantee reconciliation name the index they use (default: the core
    index), and each takes that index's own level, volatility and rate correlation."""
    from pqflow.liabilities import inspect_run, parse_portfolio, value_run
    from pqflow.models.equity import equity_option_price
    from pqflow.models.total_return import TotalReturnIndex
    from pqflow.validation.reconciliation import guarantee_values
    from pqflow.validation.run_files import load_run_inputs

    run, _ = full_run
    info = inspect_run(run)
    core_level = 1000.0  # scenario_configs/demo_typed.toml
    assert info.index_levels == {"equity_veldmark_all_share": core_level, "equity_world_equity": 850.0,
                                 "property_veldmark_property": 500.0}
    assert info.core_index == "veldmark_all_share" and info.level_of(None) == core_level
    assert info.level_of("equity_world_equity") == 850.0
    # A guarantee on world_equity: Black on the forward with the Hull-White T-forward variance
    # (Brigo and Mercurio 2006; models/equity.py), the index's own volatility and correlation.
    inputs = load_run_inputs(run)
    cal = load_calibration(run / "calibration.json")
    got = guarantee_values(inputs, maturity=10.0, index="world_equity")
    assert got is not None and got["level"] == pytest.approx(850.0, rel=1e-14)  # exp(log 850) in the file
    world = TotalReturnIndex(name="world_equity", kind="equity", level=got["level"], income_yield=0.0,
                             volatility=0.18, correlation=MATRIX[0][2])
    closed = equity_option_price(cal.curve, cal.rates, world, expiry=got["maturity"], strike=got["guarantee"],
                                 kind="put")
    assert got["closed_form"] == pytest.approx(closed, rel=1e-12)
    value, se = got["market_consistent"]
    assert abs(value - closed) < 4.0 * se, (value, closed, se)  # 4 standard errors (two-sided size 6e-5)
    core = guarantee_values(inputs, maturity=10.0)
    assert core is not None and core["level"] == pytest.approx(core_level, rel=1e-14)
    assert core["closed_form"] != got["closed_form"]
    # A unit-linked guarantee on world_equity: the control variates' known means use that
    # index's level, so the controlled value agrees with the plain mean within their errors
    # (E[D_T S_T] = S_0 of the index the product holds; a wrong level would bias it by ~15%).
    book = parse_portfolio({
        "portfolio": {"insurer": "Larkspur Mutual Life (invented)", "currency": "VMK"},
        "valuation": {"equity": "world_equity"},
        "model_point": [{"id": "UL-W", "product": "unit_linked_gmmb", "policies": 10, "age": 40, "term": 5,
                         "mortality": "none", "premium": 1000.0, "guarantee": 1000.0}],
    }, source="book.toml")
    mc = value_run(run, book, "market_consistent")
    assert mc.plain_value is not None and mc.plain_std_error is not None
    gap = abs(mc.value[-1, 0] - mc.plain_value[-1, 0])
    assert gap < 4.0 * mc.plain_std_error[-1, 0], (mc.value[-1], mc.plain_value[-1], mc.plain_std_error[-1])
