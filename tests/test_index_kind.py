"""The total-return indices as a part kind (``calibration/index_kind.py``): registered in a fresh
process with the other shipped kinds, the run's indices (the core equity from ``[equity]`` first,
then each ``[[indices]]`` entry) calibrated through the generic kind loop of
``assemble_calibration``, and their ``calibration.json`` entries written and read back through the
kind at their legacy places.

Each check names what it compares with: the price of risk ``lambda = risk premium / sigma`` (the
expected excess return over cash is the premium, the module docstring of
``measure/prices_of_risk.py``; common practice), the fitting path the indices had before they
became a kind (``calibration.parts.calibrate_index``, reading the files through the
configuration), and the stored file (layout pinned by key).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from test_core_index import INDICES, NAMES, _config

from pqflow.calibration.assemble import assemble_calibration, load_calibration
from pqflow.calibration.index_kind import INDEX_SECTION, IndexKind
from pqflow.calibration.parts import calibrate_index
from pqflow.errors import ConfigError
from pqflow.jobs.steps import write_calibration
from pqflow.models.parts import (
    PART_KINDS,
    PartContext,
    calibrate_part,
    part_entry_list,
    part_fit_records,
    part_instruments_key,
)
from pqflow.storage.calibration_file import read_calibration_file

__all__: list[str] = []

REPO = Path(__file__).resolve().parents[1]


def test_registered_first_in_a_fresh_process():
    """A fresh interpreter that imports only the calibration package has the index kind, before
    inflation (registration order is the drivers' order beyond rates)."""
    code = ("import pqflow.calibration; from pqflow.models.parts import PART_KINDS; "
            "print(list(PART_KINDS), type(PART_KINDS['indices']).__name__)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, check=True)
    assert out.stdout.split("]")[0] + "]" == "['indices', 'inflation']", out.stdout + out.stderr
    assert out.stdout.strip().endswith("IndexKind"), out.stdout + out.stderr
    kind = PART_KINDS[INDEX_SECTION]
    assert isinstance(kind, IndexKind) and part_entry_list(kind)
    assert part_instruments_key(kind) == "equity_options"


def test_no_parts_table_for_the_indices(tmp_path, demo_config_dict):
    """The indices keep ``[equity]`` and ``[[indices]]``: ``[parts.indices]`` is no section."""
    import copy

    from conftest import write_toml

    from pqflow.config.loader import load_config

    data = copy.deepcopy(demo_config_dict)
    data["parts"] = {"indices": {"name": "x"}}
    with pytest.raises((ConfigError, ValueError), match=r"parts\.indices"):
        load_config(write_toml(tmp_path / "bad.toml", data))


def test_a_configuration_with_further_indices_is_served_through_the_kind(tmp_path, demo_config_dict):
    cfg = _config(tmp_path, demo_config_dict)
    cal = assemble_calibration(cfg)
    kind = PART_KINDS[INDEX_SECTION]
    assert [i.name for i in cal.indices] == NAMES
    context = PartContext(curve=cal.curve, rates=cal.rates, correlation=cal.driver_correlation.pair)
    fits = [calibrate_part(kind, spec, {}, context) for spec in cfg.index_specs]
    # the kind gives what the configuration path gives (the fitting path before the kind)
    rho = cal.driver_correlation
    for spec, f, index in zip(cfg.index_specs, fits, cal.indices, strict=True):
        old_index, old_lam, old_fit, old_options = calibrate_index(cfg, spec, cal.curve, cal.rates,
                                                                   rho.with_rates(spec.name))
        assert f.part == old_index == index
        assert f.prices_of_risk == {spec.name: old_lam} and f.instruments == old_options == []
        # lambda = premium / sigma (common practice; typed-in volatility)
        assert old_lam == pytest.approx(spec.risk_premium / float(spec.volatility), rel=1e-14)
        assert cal.extra_prices_of_risk[spec.name] == old_lam
        assert cal.index_risk_premia[spec.name] == spec.risk_premium
    # the fit records at their legacy places: fit.equity for the core, fit.indices for the others
    records = part_fit_records(kind, cfg.index_specs, [f.fit for f in fits])
    assert list(records) == ["equity", "indices"] and records["equity"] == {"method": "typed in"}
    assert list(records["indices"]) == NAMES[1:]
    for entry in INDICES:
        rec = records["indices"][entry["name"]]
        assert rec["risk_premium"] == entry["risk_premium"]
        assert rec["correlation_with_rates"] == rho.with_rates(entry["name"])
    assert cal.fit["equity"] == records["equity"] and cal.fit["indices"] == records["indices"]
    assert cal.instruments["equity_options"] == []
    assert list(cal.instruments)[:2] == ["swaptions", "equity_options"]


@pytest.mark.parametrize("rates", ["hull_white", "g2pp"])
def test_round_trip_of_its_entries(tmp_path, demo_config_dict, rates):
    cfg = _config(tmp_path, demo_config_dict, rates)
    cal = assemble_calibration(cfg)
    kind = PART_KINDS[INDEX_SECTION]
    records = kind.records(cal.indices, cal.extra_prices_of_risk, cal.index_risk_premia, cal.rates)
    core_json, further_json = kind.parameters_json(records, cal.prices_of_risk.rates)
    # the legacy places: parameters.equity + market_prices_of_risk (rates and the core), parameters.indices
    assert list(core_json) == ["equity", "market_prices_of_risk"]
    assert core_json["equity"]["name"] == NAMES[0]
    assert core_json["market_prices_of_risk"]["equity"] == cal.extra_prices_of_risk[NAMES[0]]
    assert [e["name"] for e in further_json["indices"]] == NAMES[1:]
    # written and read back: the same indices, prices of risk and premia, through the kind
    path = write_calibration(tmp_path, cal)
    data = json.loads(Path(path).read_text())
    assert data["parameters"]["equity"] == json.loads(json.dumps(core_json["equity"]))
    assert data["parameters"]["indices"] == json.loads(json.dumps(further_json["indices"]))
    stored = read_calibration_file(path)
    indices, lams, premia = kind.from_records(stored.indices, cal.driver_correlation.with_rates)
    assert indices == cal.indices
    assert lams == {n: cal.extra_prices_of_risk[n] for n in NAMES}
    assert premia == {n: cal.index_risk_premia[n] for n in NAMES}
    back = load_calibration(path)
    assert back.indices == cal.indices and back.index_risk_premia == cal.index_risk_premia
    assert back.to_json()["parameters"] == cal.to_json()["parameters"]


def test_index_and_inflation_columns_take_their_drivers_from_their_kinds():
    """An index's log level integrates the short rate and carries its own shock, so its column
    depends on the rate driver(s) and its own driver; the CPI's drift is the nominal minus the
    real short rate, so inflation columns depend on the rates and both inflation drivers
    (Jarrow and Yildirim 2003; the structure of ``measure/blocks.economy_structure``)."""
    from pqflow.measure.blocks import column_drivers

    kind = PART_KINDS[INDEX_SECTION]
    assert kind.column_drivers_on("equity_world_equity", ("rates",)) == {"rates", "world_equity"}
    assert kind.column_drivers_on("property_veldmark_property", ("rates_x", "rates_y")) == {
        "rates_x", "rates_y", "veldmark_property"}
    assert kind.column_drivers_on("zcb_10y", ("rates",)) is None
    assert column_drivers("equity_eq", ("rates_x", "rates_y")) == {"rates_x", "rates_y", "eq"}
    for col in ("cpi", "real_short_rate", "real_zcb_10y"):
        assert PART_KINDS["inflation"].column_drivers_on(col, ("rates",)) == {"rates", "real_rate", "inflation"}
        assert column_drivers(col, ("rates",), ("real_rate", "inflation")) == {"rates", "real_rate", "inflation"}
    assert PART_KINDS["inflation"].column_drivers_on("equity_eq", ("rates",)) is None
    with pytest.raises(ValueError, match="no driver is known"):
        column_drivers("unknown_column", ("rates",))


@pytest.mark.parametrize("module", ["pqflow.validation.martingale", "pqflow.validation.reconciliation",
                                    "pqflow.liabilities.valuation"])
def test_every_caller_of_column_drivers_has_the_kinds(module):
    """The index and inflation rows of the column table live with their kinds: a fresh process
    importing only a module that asks for a column's drivers has them registered."""
    code = (f"import {module}; from pqflow.measure.blocks import column_drivers; "
            "print(sorted(column_drivers('equity_eq', ('rates',))), sorted(column_drivers('cpi', ('rates',))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=REPO, check=True)
    assert out.stdout.strip() == "['eq', 'rates'] ['inflation', 'rates', 'real_rate']", out.stdout + out.stderr


def test_a_kind_must_say_how_its_parts_are_written():
    # Common practice: a kind is refused at registration, with its name, unless its parts have a
    # calibration.json form: one entry each (to_json / from_json) or an entry list with hooks of
    # its own, as the indices (which therefore carry no to_json / from_json).
    from pqflow.models.parts import EntryPartKind, entry_kind, register_part

    kind = PART_KINDS[INDEX_SECTION]
    assert part_entry_list(kind) and not isinstance(kind, EntryPartKind)
    with pytest.raises(TypeError, match="no single calibration.json entry"):
        entry_kind(kind)
    assert isinstance(PART_KINDS["inflation"], EntryPartKind)

    class NoForm:  # an index kind without its entry list: nothing would write its parts
        section = "no_form"
        config_model = IndexKind().config_model
        drivers = build = prices_of_risk = column_drivers = martingale_assets = describe = IndexKind.drivers

    with pytest.raises(TypeError, match="NoForm writes no calibration.json entry"):
        register_part(NoForm())  # type: ignore[arg-type]
    assert "no_form" not in PART_KINDS
