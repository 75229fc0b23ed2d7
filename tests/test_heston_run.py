"""A Heston index inside a run: the driver increments it reads from the economy, its density
and martingale in both sets through ``simulate_part``, the correlation rules, and a whole run
writing its columns.

References: Hull-White's SDE ``dx = -a x dt + sigma dB`` and the total-return index's
``d ln S = r dt - sigma^2 dt / 2 + sigma dB`` (Brigo and Mercurio 2006, ch. 3.3; the model's
own definition) for the recovered increments, whose moments and correlations are those of
Brownian increments with the configured correlation matrix (common practice); the martingale
property and the density's mean 1 (common practice). Tolerances are in standard errors with
fixed seeds.
"""

from __future__ import annotations

import shutil
import tomllib

import numpy as np
import pyarrow.parquet as pq
import pytest
from conftest import DEMO, write_toml

from pqflow.calibration import assemble_calibration, build_model
from pqflow.calibration.heston_parts import projection
from pqflow.calibration.parts import DriverCorrelation
from pqflow.config import load_config
from pqflow.errors import CalibrationError
from pqflow.measure.heston_density import heston_prices_of_risk
from pqflow.models.heston import HestonIndex, HestonParams, expected_sqrt_variance
from pqflow.simulation.heston_part import driver_increments
from pqflow.simulation.scenarios import simulate_part

__all__: list[str] = []


@pytest.fixture(scope="module")
def demo():
    return assemble_calibration(load_config(DEMO))


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
def test_recovered_driver_increments_are_the_economy_drivers(demo, measure) -> None:
    """The rates and world-equity driver increments read back from the columns: mean 0,
    variance dt, correlation as the matrix says (in the set's own measure)."""
    model = build_model(demo, (1.0,))
    times = np.arange(0.0, 6.0)
    n = 20_000
    cols = simulate_part(model, times, measure=measure, n_paths=n, seed=3, batch=0, antithetic=False)
    r = driver_increments(model, "rates", times, cols, measure=measure)
    w = driver_increments(model, "world_equity", times, cols, measure=measure)
    se = 1.0 / np.sqrt(n)
    assert np.all(np.abs(r.mean(axis=0)) < 4 * se) and np.all(np.abs(w.mean(axis=0)) < 4 * se)
    assert np.all(np.abs(r.var(axis=0) - 1.0) < 4 * np.sqrt(2.0) * se)
    assert np.all(np.abs(w.var(axis=0) - 1.0) < 4 * np.sqrt(2.0) * se)
    rho = demo.driver_correlation.pair("rates", "world_equity")
    corr = np.array([np.corrcoef(r[:, k], w[:, k])[0, 1] for k in range(r.shape[1])])
    print(measure, "correlation per step", np.round(corr, 4), "matrix", rho)
    assert np.all(np.abs(corr - rho) < 4 * (1 - rho**2) * se)


def _spec(demo, model, name="veldmark_all_share"):
    """A Heston all-share index on the demo economy, correlated with rates and world equity."""
    corr = demo.driver_correlation
    p = HestonParams(v0=0.03, kappa=1.2, theta=0.04, xi=0.5, rho=-0.5)
    g = ["rates", "world_equity"]
    c = corr.matrix
    ig = [corr.names.index(d) for d in g]
    i = corr.names.index(name)
    beta = np.linalg.solve(c[np.ix_(ig, ig)], c[i, ig])
    explained = float(c[i, ig] @ beta)
    lam = heston_prices_of_risk(kappa=p.kappa, theta=p.theta, xi=p.xi, equity_risk_premium=0.035,
                                real_world_long_run_volatility=None, rho=p.rho, explained=explained)
    return HestonIndex(name=name, column=f"equity_{name}", level=1000.0, income_yield=0.028, params=p,
                       prices_of_risk=lam, loadings=tuple(zip(g, beta.tolist(), strict=True)), explained=explained,
                       rates_correlation=float(c[i, ig[0]]), substeps_per_year=12)


@pytest.mark.parametrize("measure", ["market_consistent", "real_world"])
def test_heston_part_in_simulate_part_density_and_martingale(demo, measure) -> None:
    """Through simulate_part: the full density has mean 1, the deflated Heston index has mean
    S_0, and the index's log return correlates with the world equity's driver as configured
    (the projection carries it: cov(int sqrt(v) dB_S, dB_w) = rho_Sw int E sqrt(v_t) dt, with
    E sqrt(v_t) from the non-central chi-square law, Cox-Ingersoll-Ross 1985)."""
    model = build_model(demo, (1.0,))
    spec = _spec(demo, model)
    times = np.arange(0.0, 11.0)
    n = 20_000
    cols = simulate_part(model, times, measure=measure, n_paths=n, seed=5, batch=0, antithetic=True, heston=(spec,))
    dens = cols["q_density" if measure == "real_world" else "p_density"]
    pairs = 0.5 * (dens[0::2] + dens[1::2])
    z = (pairs.mean(axis=0) - 1.0)[1:] / (pairs.std(axis=0)[1:] / np.sqrt(pairs.shape[0]))
    print(measure, "density z", np.round(z, 2))
    assert np.all(np.abs(z) < 4.0)
    x = cols["deflator"] * cols[spec.column] / spec.level
    pairs = 0.5 * (x[0::2] + x[1::2])
    z = (pairs.mean(axis=0) - 1.0)[1:] / (pairs.std(axis=0)[1:] / np.sqrt(pairs.shape[0]))
    print(measure, "martingale z", np.round(z, 2))
    assert np.all(np.abs(z) < 4.0)
    assert "variance_veldmark_all_share" in cols and np.all(cols["variance_veldmark_all_share"] >= 0.0)
    if measure == "market_consistent":
        # the index's martingale part over year 1 against the world driver: cov = rho_Sw int E sqrt(v) dt
        w = driver_increments(model, "world_equity", times, cols, measure=measure)[:, 0]
        ret = np.log(cols[spec.column][:, 1] / spec.level) - np.log(cols["cash_account"][:, 1])
        rho_sw = demo.driver_correlation.pair("veldmark_all_share", "world_equity")
        nodes, weights = np.polynomial.legendre.leggauss(32)
        mean_sqrt = 0.5 * float(np.sum(weights * expected_sqrt_variance(spec.params, 0.5 * (nodes + 1.0))))
        prod = (ret - ret.mean()) * w
        est = prod.mean() / mean_sqrt
        se = prod.std() / np.sqrt(n) / mean_sqrt
        print(f"cov(index log return, world driver) / int E sqrt(v): {est:.4f} (SE {se:.4f}); configured {rho_sw}")
        assert abs(est - rho_sw) < 4 * se + 0.01


def test_projection_refuses_correlations_it_cannot_simulate() -> None:
    names = ("rates", "a", "b", "inflation")
    m = np.array([[1.0, -0.2, 0.1, 0.3], [-0.2, 1.0, 0.5, 0.2], [0.1, 0.5, 1.0, 0.0], [0.3, 0.2, 0.0, 1.0]])
    corr = DriverCorrelation(names=names, matrix=m)
    with pytest.raises(CalibrationError, match=r"set inflation -0\.0757576 \(given \+0\.2\)"):
        projection("a", corr, ("rates", "b"), "correlations.csv")
    beta = np.linalg.solve(m[np.ix_([0, 2], [0, 2])], m[1, [0, 2]])
    m2 = m.copy()
    m2[1, 3] = m2[3, 1] = float(beta @ m[[0, 2], 3])
    loadings, explained = projection("a", DriverCorrelation(names=names, matrix=m2), ("rates", "b"), "x")
    assert abs(explained - float(m[1, [0, 2]] @ beta)) < 1e-12
    assert [d for d, _ in loadings] == ["rates", "b"]


def test_demo_smile_run_writes_the_heston_index_and_its_variance(tmp_path) -> None:
    """A short run of demo_smile.toml (invented data): the index column and, when asked for,
    variance_<index>; the calibration round trip of the Heston part."""
    from pqflow.pipeline.flows import run_in_process

    shutil.copytree(DEMO.parent / "market_data", tmp_path / "market_data")
    data = tomllib.loads((DEMO.parent / "demo_smile.toml").read_text())
    data["simulation"].update({"scenarios": 100, "horizon_years": 5, "batch_size": 100})
    data["outputs"]["bond_maturities"] = [1, 5, 10]
    data["outputs"]["columns"] = ["short_rate", "equity_*", "variance_*"]
    data.pop("credit", None)
    data["market_data"].pop("credit_spreads", None)
    cfg = write_toml(tmp_path / "smile.toml", data)
    run_in_process(cfg, tmp_path / "run", overwrite=True)
    part = next((tmp_path / "run" / "scenarios" / "real_world").glob("*.parquet"))
    table = pq.read_table(part)
    assert "variance_veldmark_all_share" in table.column_names and "equity_veldmark_all_share" in table.column_names
    # the wealth-ratio comparison (American Academy of Actuaries 2005) for each equity index
    import json

    summary = json.loads((tmp_path / "run" / "validation" / "summary.json").read_text())
    by_index = summary["checks"]["real_world"]["wealth_ratio_benchmark"]["by_index"]
    assert by_index["equity_veldmark_all_share"]["volatility_model"] == "heston"
    assert by_index["equity_world_equity"]["volatility_model"] == "deterministic"
    assert (tmp_path / "run" / "validation" / "wealth_ratio_by_index.csv").exists()
    # densities holding the Heston part are judged by the robust t, the others by the lognormal
    # identity (sizes measured in tests/test_heston_density_rule.py)
    import pandas as pd

    dens = pd.read_csv(tmp_path / "run" / "validation" / "density.csv")
    rules = dens.groupby("column")["test"].agg(lambda t: set(x.split(" (")[0] for x in t))
    assert rules["q_density"] == {"robust t"} and rules["p_density"] == {"robust t"}
    assert rules["q_density_rates_veldmark_all_share"] == {"robust t"}
    assert rules["q_density_rates"] == {"lognormal identity"}
    # the sign-off page shows the smile fit and the wealth ratios by index (pqflow.report.smile)
    page = (tmp_path / "run" / "validation" / "report.html").read_text()
    assert "Smile fit: veldmark all share (Heston)" in page and "Feller ratio" in page
    assert "Wealth-ratio percentiles by equity index" in page and "equity_world_equity (deterministic)" in page


def test_blocks_with_a_heston_index_carry_their_restricted_density(demo) -> None:
    """A block holding the Heston index's driver carries its own restricted density (the Gaussian
    ratio of its rates and the index's projection, times the Heston part's own ratio), not the
    full density; a block without it keeps its Gaussian restricted density. The density's
    properties (mean 1, the xi -> 0 Girsanov limit, ESS) are in tests/test_heston_blocks.py."""
    from pqflow.measure.blocks import DensityBlock

    model = build_model(demo, (1.0,))
    spec = _spec(demo, model)
    blocks = (DensityBlock(name="rates", drivers=("rates",)),
              DensityBlock(name="rates_veldmark_all_share", drivers=("rates", "veldmark_all_share")))
    times = np.arange(0.0, 4.0)
    cols = simulate_part(model, times, measure="real_world", n_paths=200, seed=5, batch=0,
                         antithetic=True, heston=(spec,), density_blocks=blocks)
    assert not np.array_equal(cols["q_density_rates_veldmark_all_share"], cols["q_density"])
    assert not np.array_equal(cols["q_density_rates"], cols["q_density"])
    # without the Heston index the rates block is the same restricted density (to rounding: the
    # blocks' exponents are accumulated together)
    plain = simulate_part(model, times, measure="real_world", n_paths=200, seed=5, batch=0,
                          antithetic=True, density_blocks=blocks[:1])
    assert np.allclose(plain["q_density_rates"], cols["q_density_rates"], rtol=1e-12, atol=0.0)
