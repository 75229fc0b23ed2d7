"""The core equity is the first of the run's total-return indices, not a special case.

``[equity]`` joins the ``[[indices]]`` at one place (``RunConfig.index_specs``); every index is
fitted by one path (``calibration.parts.calibrate_index``), held as one parameter type
(``TotalReturnIndex``, with its correlation with the rate driver(s)), priced of risk per driver
(``lambda = risk premium / sigma``: the expected excess return over cash is the premium, the
module docstring of ``measure/prices_of_risk.py``; common practice) and recorded as one typed
record (``IndexRecord``) in a ``calibration.json`` whose layout is unchanged
(``parameters.equity``, ``parameters.indices``). Each check below names what it compares with.
"""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest
from conftest import write_toml

from pqflow.calibration.assemble import assemble_calibration, build_model, load_calibration
from pqflow.calibration.parts import calibrate_index
from pqflow.config.loader import load_config
from pqflow.config.schema import IndexSection, IndexSpec
from pqflow.errors import ConfigError
from pqflow.jobs.steps import write_calibration
from pqflow.models.g2pp import G2PlusPlusParams
from pqflow.storage.calibration_file import read_calibration_file

__all__: list[str] = []

INDICES = [
    {"name": "world_equity", "kind": "equity", "level": 850.0, "income_yield": 0.019, "volatility": 0.18,
     "risk_premium": 0.04},
    {"name": "veldmark_property", "kind": "property", "level": 500.0, "income_yield": 0.042, "volatility": 0.11,
     "risk_premium": 0.025},
]
NAMES = ["veldmark_all_share", "world_equity", "veldmark_property"]
#: invented, positive definite (eigenvalues 0.24 .. 2.11)
HW_MATRIX = [[1, -0.15, -0.10, -0.20], [-0.15, 1, 0.75, 0.45], [-0.10, 0.75, 1, 0.35], [-0.20, 0.45, 0.35, 1]]
#: invented, positive definite (eigenvalues 0.24 .. 2.08); the (rates_x, rates_y) entry is the G2++ rho
G2_MATRIX = [[1, -0.7, -0.10, -0.05, -0.15], [-0.7, 1, -0.05, -0.08, -0.10], [-0.10, -0.05, 1, 0.75, 0.45],
             [-0.05, -0.08, 0.75, 1, 0.35], [-0.15, -0.10, 0.45, 0.35, 1]]
G2 = {"a": 0.5, "sigma": 0.012, "b": 0.05, "eta": 0.008, "rho": -0.7}


def _config(tmp_path, demo_config_dict, rates: str = "hull_white"):
    data = copy.deepcopy(demo_config_dict)
    del data["equity"]["correlation_with_rates"]
    data["indices"] = copy.deepcopy(INDICES)
    if rates == "g2pp":
        del data["hull_white"]
        data["rates"] = {"model": "g2pp"}
        data["g2pp"] = dict(G2)
        data["correlations"] = {"drivers": ["rates_x", "rates_y", *NAMES], "matrix": G2_MATRIX}
    else:
        data["correlations"] = {"drivers": ["rates", *NAMES], "matrix": HW_MATRIX}
    return load_config(write_toml(tmp_path / f"{rates}.toml", data))


def test_equity_joins_the_index_list_at_one_place(tmp_path, demo_config_dict):
    cfg = _config(tmp_path, demo_config_dict)
    specs = cfg.index_specs
    assert [s.name for s in specs] == NAMES
    core = specs[0]
    assert core.core and not any(s.core for s in specs[1:])
    # the [equity] keys, read as an index's (values of scenario_configs/demo_typed.toml)
    assert (core.kind, core.level, core.income_yield, core.volatility) == ("equity", 1000.0, 0.028, 0.17)
    assert core.risk_premium == cfg.real_world.equity_risk_premium == 0.035
    assert (core.key, core.yield_key) == ("equity", "dividend_yield")
    assert (specs[1].key, specs[1].yield_key, specs[1].risk_premium) == ("indices.world_equity", "income_yield", 0.04)


def test_the_core_equity_is_fitted_as_any_index_is(tmp_path, demo_config_dict):
    cfg = _config(tmp_path, demo_config_dict)
    cal = assemble_calibration(cfg)
    assert [i.name for i in cal.indices] == NAMES and cal.core_index is cal.indices[0]
    assert cal.further_indices == cal.indices[1:]
    # the [equity] values written as an [[indices]] entry give the same index and price of risk
    core = cal.core_index
    as_further = IndexSpec.further(IndexSection(name=core.name, kind="equity", level=1000.0, income_yield=0.028,
                                                volatility=0.17, risk_premium=0.035))
    rho = cal.driver_correlation.with_rates(core.name)
    index, lam, fit, options = calibrate_index(cfg, as_further, cal.curve, cal.rates, rho)
    assert index == core and fit == cal.fit["equity"] == {"method": "typed in"} and options == []
    # lambda = risk premium / sigma per index (common practice; module docstring of prices_of_risk.py)
    assert lam == cal.extra_prices_of_risk[core.name]
    for name, premium, vol in zip(NAMES, (0.035, 0.04, 0.025), (0.17, 0.18, 0.11), strict=True):
        assert cal.extra_prices_of_risk[name] == pytest.approx(premium / vol, rel=1e-15)
        assert cal.index_risk_premia[name] == premium
    # each index carries its correlation with the short-rate driver: the matrix's first row
    assert [i.correlation for i in cal.indices] == HW_MATRIX[0][1:]
    # the economy's drivers: the rates, then the indices in the same order, core first
    assert build_model(cal, (1.0,)).driver_names == ("rates", *NAMES)


@pytest.mark.parametrize("rates", ["hull_white", "g2pp"])
def test_every_index_reads_back_as_one_typed_record(tmp_path, demo_config_dict, rates):
    cfg = _config(tmp_path, demo_config_dict, rates)
    cal = assemble_calibration(cfg)
    path = write_calibration(tmp_path, cal)
    rec = read_calibration_file(path)
    assert [r.name for r in rec.indices] == NAMES and [r.core for r in rec.indices] == [True, False, False]
    core = rec.core_index
    assert core == rec.indices[0] == rec.index() == rec.index(NAMES[0])
    assert (core.kind, core.column, core.level, core.dividend_yield) == ("equity", "equity_veldmark_all_share",
                                                                         1000.0, 0.028)
    assert core.risk_premium == 0.035 and core.market_price_of_risk == pytest.approx(0.035 / 0.17, rel=1e-15)
    world, prop = rec.index("world_equity"), rec.index("veldmark_property")
    assert (world.column, world.risk_premium, world.income_yield) == ("equity_world_equity", 0.04, 0.019)
    assert (prop.column, prop.kind, prop.level) == ("property_veldmark_property", "property", 500.0)
    if rates == "g2pp":
        # the pairs (rho_x, rho_y) of the matrix; the core's short-rate correlation is
        # (rho_x sigma + rho_y eta) / sqrt(sigma^2 + eta^2 + 2 rho sigma eta) (Brigo and Mercurio 2006, ch. 4.2)
        assert core.correlation_with_rate_factors == (-0.10, -0.05)
        assert world.correlation_with_rate_factors == (-0.05, -0.08) and world.correlation_with_rates is None
        s, e, r = G2["sigma"], G2["eta"], G2["rho"]
        want = (-0.10 * s - 0.05 * e) / np.sqrt(s * s + e * e + 2 * r * s * e)
        assert core.correlation_with_rates == pytest.approx(want, rel=1e-14)
        assert isinstance(cal.rates, G2PlusPlusParams) and cal.core_index.correlation == (-0.10, -0.05)
    else:
        assert core.correlation_with_rates == -0.15 and core.correlation_with_rate_factors is None
        assert (world.correlation_with_rates, prop.correlation_with_rates) == (-0.10, -0.20)
    with pytest.raises(ConfigError, match=r"no index 'gold' recorded \(has: veldmark_all_share, world_equity, "
                                          r"veldmark_property\)"):
        rec.index("gold")
    # the file keeps its layout: the core index under parameters.equity, the others under parameters.indices
    par = json.loads(path.read_text(encoding="utf-8"))["parameters"]
    want_keys = ["name", "level", "dividend_yield", "volatility", "correlation_with_rates"]
    assert list(par["equity"]) == want_keys + (["correlation_with_rate_factors"] if rates == "g2pp" else [])
    assert list(par["market_prices_of_risk"]) == ["rates", "equity", "note"]
    assert [i["name"] for i in par["indices"]] == NAMES[1:]
    assert list(par["indices"][0]) == ["name", "kind", "level", "income_yield", "volatility", "risk_premium",
                                       "market_price_of_risk"]
    # and reads back into the same indices, each with its rate correlation
    again = load_calibration(path)
    assert again.indices == cal.indices and again.to_json() == cal.to_json()
    assert again.extra_prices_of_risk == cal.extra_prices_of_risk
