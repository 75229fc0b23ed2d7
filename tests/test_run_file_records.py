"""The typed readers of a run's JSON files besides calibration.json: ``validation/summary.json``
(:mod:`pqflow.storage.validation_summary`), ``manifest.json`` (:mod:`pqflow.storage.manifest`),
``valuation/summary.json`` (:mod:`pqflow.storage.valuation_summary`) and
``sensitivities/index.json`` (:mod:`pqflow.storage.sensitivity_index`).

Common practice for a file format with one owner: the reader gives back what the writer wrote
(round trip), a file written before a field existed still reads (the field is ``None``), and a
file lacking a required key is refused naming the file and the key. The round trips of a real
run's files are in ``test_report.py`` (its finished, valued run) and ``test_sensitivities.py``.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json, write_json_atomic
from pqflow.storage.manifest import ManifestRecord, read_manifest
from pqflow.storage.sensitivity_index import (
    read_sensitivity_index,
    sensitivity_index_document,
    sensitivity_index_entry,
)
from pqflow.storage.validation_summary import (
    ValidationSummary,
    read_validation_summary,
    record_sensitivity_verdicts,
)
from pqflow.storage.valuation_summary import read_valuation_summary

__all__: list[str] = []

# one check's entry as pqflow.validation.summary.cells_summary and the checks write it (values invented)
CHECK = {
    "cells": 40, "outside_95": 2, "expected_outside_95_by_chance": 2.0, "outside_99": 0,
    "expected_outside_99_by_chance": 0.4, "max_abs_z": 2.1, "worst_cell": {"asset": "deflator", "time": 5.0},
    "family_level": 0.99, "family_critical_z": 3.22, "verdict": "inconclusive", "inconclusive_cells": 3,
    "inconclusive_from_time": 30.0, "material_deviation": 0.05, "power_rule": "a cell is inconclusive when ...",
    "kind": "martingale", "source": "the files", "counts_toward_verdict": True, "warnings": ["w1"],
    "ess_warning_share": 0.1,
}
SUMMARY = {
    "caution": "supports, does not certify", "verdict": "inconclusive", "rule": "the rule",
    "inconclusive": {"cells": 3, "from_time": 30.0, "checks": ["martingale_real_world"]},
    "checks": {
        "martingale_real_world": CHECK,
        "real_world": {"verdict": "pass", "counts_toward_verdict": False, "kind": "targets",
                       "wealth_ratio_benchmark": {"verdict": "fail", "counts_toward_verdict": False}},
    },
    "densities": [{"measure": "real_world", "column": "q_density", "block": None, "usable_horizon": 19.0}],
    "density_budget": {"real_world": {"rates": 0.4}},
}
MANIFEST = {
    "run_id": "abc", "run_name": "veldmark-demo", "created_utc": "2026-12-05T21:00:00+00:00",
    "pqflow_version": "0.1.0", "python": "3.11.7", "numpy": "2.4", "pyarrow": "26.0", "valuation_date": "2026-09-30",
    "config_sha256": "f" * 64,
    "seeds": {"root_seed": 20261201, "scheme": "SeedSequence", "measure_streams": {"real_world": 1}},
    "scenarios": {"real_world": 500, "market_consistent": 500}, "output_times": {"real_world": 51},
    "horizon_years": {"real_world": 50.0}, "antithetic": True, "signoff": {"prepared_by": "A. Actuary"},
    "files": [{"path": "calibration.json", "bytes": 10, "sha256": "0" * 64},
              {"path": "scenarios/real_world/part-00000.parquet", "bytes": 20, "sha256": "1" * 64, "rows": 500}],
}
VALUATION = {
    "currency": "VMK", "insurer": "Larkspur Mutual Life (invented)", "valuation_date": "2026-09-30",
    "lines": [
        {"level": "product", "name": "gmmb", "quantity": "best_estimate", "market_consistent_value": 100.0,
         "market_consistent_se": 2.0, "certainty_equivalent_value": 90.0, "tvog": 10.0,
         "market_consistent_value_without_controls": 101.0},
        {"level": "total", "name": "total", "quantity": "best_estimate", "market_consistent_value": 150.0,
         "certainty_equivalent_value": 140.0, "tvog": 10.0, "tvog_se": 3.0},
        {"level": "product", "name": "gmmb", "quantity": "guarantee", "market_consistent_value": 12.0},
        {"level": "model_point", "name": "mp1", "quantity": "best_estimate", "market_consistent_value": 1.0},
    ],
    "reconciliation": {"verdict": "agree", "rule": "r"},
}


def _write(path: Path, data: dict) -> Path:
    write_json_atomic(path, data)
    return path


def test_the_validation_summary_reads_what_was_written(tmp_path):
    record = read_validation_summary(_write(tmp_path / "summary.json", SUMMARY))
    assert record.to_json() == SUMMARY  # round trip of the whole document
    assert (record.verdict, record.rule, record.caution) == ("inconclusive", "the rule", "supports, does not certify")
    c = record.checks["martingale_real_world"]
    assert (c.cells, c.outside_95, c.outside_99, c.max_abs_z, c.family_critical_z) == (40, 2, 0, 2.1, 3.22)
    assert (c.inconclusive_cells, c.inconclusive_from_time, c.kind, c.source) == (3, 30.0, "martingale", "the files")
    assert c.counts_toward_verdict is True and c.warnings == ("w1",) and c.ess_warning_share == 0.1
    assert c.extras["worst_cell"] == {"asset": "deflator", "time": 5.0} and "verdict" not in c.extras
    with pytest.raises(TypeError):
        c.extras["worst_cell"] = {}  # type: ignore[index]  # read-only
    rw = record.checks["real_world"]
    assert rw.counts_toward_verdict is False and rw.wealth_ratio_benchmark == {"verdict": "fail",
                                                                              "counts_toward_verdict": False}
    assert record.inconclusive is not None and record.inconclusive.checks == ("martingale_real_world",)
    assert record.densities is not None and record.densities[0]["usable_horizon"] == 19.0
    assert record.density_budget == {"real_world": {"rates": 0.4}}
    assert record.check("nothing") is None and record.check_or_absent("nothing").verdict is None


def test_an_older_summary_reads_with_its_missing_fields_none(tmp_path):
    # a run written before densities, the inconclusive totals, counts_toward_verdict and the power rule
    older = copy.deepcopy(SUMMARY)
    for key in ("densities", "density_budget", "inconclusive", "caution"):
        del older[key]
    for key in ("counts_toward_verdict", "inconclusive_cells", "inconclusive_from_time", "power_rule", "kind"):
        del older["checks"]["martingale_real_world"][key]
    record = read_validation_summary(_write(tmp_path / "summary.json", older))
    c = record.checks["martingale_real_world"]
    assert c.counts_toward_verdict is True  # the default the checks always had
    assert (c.inconclusive_cells, c.inconclusive_from_time, c.power_rule, c.kind) == (None, None, None, None)
    assert (record.densities, record.density_budget, record.inconclusive, record.caution) == (None, None, None, None)


@pytest.mark.parametrize("drop, named", [
    (("verdict",), "'verdict'"),
    (("checks",), "'checks'"),
    (("checks", "martingale_real_world", "verdict"), "checks.martingale_real_world has no key 'verdict'"),
])
def test_a_summary_missing_a_required_key_names_file_and_key(tmp_path, drop, named):
    data = copy.deepcopy(SUMMARY)
    target = data
    for key in drop[:-1]:
        target = target[key]
    del target[drop[-1]]
    path = _write(tmp_path / "summary.json", data)
    with pytest.raises(IntegrityError) as err:
        read_validation_summary(path)
    assert str(path) in str(err.value) and named in str(err.value)


def test_a_damaged_summary_is_refused_naming_the_file(tmp_path):
    path = tmp_path / "summary.json"
    path.write_text('{"verdict": "pass", "checks": {', encoding="utf-8")
    with pytest.raises(IntegrityError, match="not valid JSON"):
        read_validation_summary(path)


def test_the_sensitivity_verdicts_are_added_and_a_failed_set_fails_the_run(tmp_path):
    path = _write(tmp_path / "summary.json", SUMMARY)
    out = record_sensitivity_verdicts(path, {"up": "pass", "down": "fail"},
                                      {"up": "sensitivities/up/validation/summary.json",
                                       "down": "sensitivities/down/validation/summary.json"})
    assert read_json(path) == out and out["verdict"] == "fail"
    assert out["sensitivities"]["down"] == {"verdict": "fail", "summary": "sensitivities/down/validation/summary.json"}
    assert {k: v for k, v in out.items() if k not in ("sensitivities", "verdict")} == \
        {k: v for k, v in SUMMARY.items() if k != "verdict"}  # nothing else changes
    assert read_validation_summary(path).sensitivities == out["sensitivities"]


def test_the_manifest_reads_what_was_written(tmp_path):
    _write(tmp_path / "manifest.json", MANIFEST)
    record = read_manifest(tmp_path)
    assert dict(record.document) == MANIFEST
    assert {**record.header(), "files": list(record.files)} == MANIFEST
    assert (record.run_id, record.run_name, record.config_sha256, record.root_seed) == \
        ("abc", "veldmark-demo", "f" * 64, 20261201)
    assert record.seed_scheme == "SeedSequence" and record.antithetic is True
    assert record.scenarios == {"real_world": 500, "market_consistent": 500}
    assert record.signoff == {"prepared_by": "A. Actuary"}
    entries = record.file_entries()
    assert entries["scenarios/real_world/part-00000.parquet"].rows == 500
    assert entries["calibration.json"].rows is None and entries["calibration.json"].bytes == 10


def test_an_older_manifest_reads_and_one_without_files_is_refused(tmp_path):
    older = {k: v for k, v in MANIFEST.items() if k in ("run_id", "files")}  # before seeds, hashes, sign-off
    _write(tmp_path / "manifest.json", older)
    record = read_manifest(tmp_path)
    assert (record.root_seed, record.config_sha256, record.signoff, record.run_name) == (None, None, None, None)
    _write(tmp_path / "manifest.json", {k: v for k, v in MANIFEST.items() if k != "files"})
    with pytest.raises(IntegrityError, match="key 'files'") as err:
        read_manifest(tmp_path)
    assert str(tmp_path / "manifest.json") in str(err.value)
    with pytest.raises(IntegrityError, match="no manifest.json"):
        read_manifest(tmp_path / "nowhere")
    assert isinstance(ManifestRecord.from_json(older), ManifestRecord)


def test_the_valuation_summary_reads_what_was_written(tmp_path):
    record = read_valuation_summary(_write(tmp_path / "summary.json", VALUATION))
    assert dict(record.document) == VALUATION and [dict(e) for e in record.line_entries()] == VALUATION["lines"]
    assert (record.currency, record.insurer, record.reconciliation) == ("VMK", VALUATION["insurer"],
                                                                        {"verdict": "agree", "rule": "r"})
    gmmb = record.lines[0]
    assert (gmmb.market_consistent_value, gmmb.market_consistent_se, gmmb.certainty_equivalent_value) == \
        (100.0, 2.0, 90.0)
    assert gmmb.tvog_se == 2.0  # no tvog_se written: the market-consistent SE, as the report always showed
    assert record.lines[1].tvog_se == 3.0
    # best estimates of product and total lines; the plain mean where one is recorded
    assert record.best_estimates("market_consistent") == {"gmmb": 101.0, "total": 150.0}
    assert record.best_estimates("market_consistent", plain=False) == {"gmmb": 100.0, "total": 150.0}
    assert record.best_estimates("certainty_equivalent") == {"gmmb": 90.0, "total": 140.0}
    older = {"lines": [{"name": "total", "level": "total", "quantity": "best_estimate"}]}  # before currency etc.
    old = read_valuation_summary(_write(tmp_path / "old.json", older))
    assert (old.currency, old.reconciliation, old.sensitivities, old.conventions) == (None, None, None, ())


@pytest.mark.parametrize("data, named", [
    ({"currency": "VMK"}, "key 'lines'"),
    ({"lines": [{"level": "total"}]}, "lines[0] has no key 'name'"),
])
def test_a_valuation_summary_missing_a_required_key_names_file_and_key(tmp_path, data, named):
    path = _write(tmp_path / "summary.json", data)
    with pytest.raises(IntegrityError) as err:
        read_valuation_summary(path)
    assert str(path) in str(err.value) and named in str(err.value)


def test_the_sensitivity_index_reads_what_its_document_wrote(tmp_path):
    assert read_sensitivity_index(tmp_path) is None  # a run without sensitivities
    entries = [{"name": "up", "description": "d", "path": "sensitivities/up", "measures": ["market_consistent"],
                "keep_volatility_parameters": True, "shocks": {"curve_shift_bp": 100.0}, "verdict": "pass"}]
    assert sensitivity_index_entry(name="up", description="d", measures=("market_consistent",),
                                   keep_volatility_parameters=True, shocks={"curve_shift_bp": 100.0},
                                   verdict="pass") == entries[0]
    assert list(sensitivity_index_entry(name="up", description="d", measures=(), keep_volatility_parameters=True,
                                        shocks={}, verdict="pass")) == list(entries[0])  # key order as written
    document = sensitivity_index_document(entries)
    assert list(document) == ["note", "sensitivities"] and document["sensitivities"] == entries
    _write(tmp_path / "sensitivities" / "index.json", document)
    index = read_sensitivity_index(tmp_path)
    assert index is not None and index.names == ["up"]
    assert index.sensitivities[0].measures == ("market_consistent",) and index.sensitivities[0].verdict == "pass"
    assert dict(index.sensitivities[0].entry) == entries[0]
    _write(tmp_path / "sensitivities" / "index.json", {"sensitivities": [{"path": "x"}]})
    with pytest.raises(IntegrityError, match=r"sensitivities\[0\] has no key 'name'"):
        read_sensitivity_index(tmp_path)


def test_validation_summary_from_json_names_where_it_came_from():
    with pytest.raises(IntegrityError, match="in memory: no key 'checks'"):
        ValidationSummary.from_json({"verdict": "pass"}, where="in memory")
    assert json.loads(json.dumps(ValidationSummary.from_json(SUMMARY).to_json())) == SUMMARY


# check-specific entries as the density, market-consistency, real-world and reconciliation checks
# write them (values invented)
DENSITY = {**CHECK, "min_ess_share": 0.04, "max_weight_share": 0.08, "ess_below_warning_from_time": 20.0,
           "at_horizon": {"time": 50.0, "mean_weight": 0.65, "std_error": 0.06, "ess_share": 0.05,
                          "max_weight_share": 0.05}}
MARKET = {"verdict": "pass", "rule": "quotes within tolerance",
          "not_testable": [{"instrument": "swaption 30y x 30y", "reason": "beyond the curve"}]}
REAL_WORLD = {"verdict": "pass", "rule": "targets", "house_view_fit": {"quantity": "short_rate",
                                                                      "max_abs_gap_bp": 1e-12, "note": "n"}}
RECONCILIATION = {"verdict": "pass", "guarantee": {"product": "put", "maturity": 10.0, "guaranteed_amount": 1000.0,
                                                   "index_level": 1000.0},
                  "values": {"real_world_sample_se": 2.5}}


def test_the_check_specific_fields_the_report_reads_are_named_properties():
    s = ValidationSummary.from_json({"verdict": "pass", "checks": {
        "density_real_world": DENSITY, "market_consistency": MARKET, "real_world": REAL_WORLD,
        "reconciliation": RECONCILIATION, "martingale_real_world": CHECK}})
    d = s.checks["density_real_world"]
    assert (d.min_ess_share, d.max_weight_share) == (0.04, 0.08)
    at = d.at_horizon
    assert (at.time, at.mean_weight, at.std_error, at.ess_share, at.max_weight_share) == (50.0, 0.65, 0.06, 0.05, 0.05)
    assert dict(s.checks["martingale_real_world"].worst_cell) == {"asset": "deflator", "time": 5.0}
    m = s.checks["market_consistency"]
    assert [(u.instrument, u.reason) for u in m.not_testable] == [("swaption 30y x 30y", "beyond the curve")]
    assert m.rule_text == "quotes within tolerance"
    fit = s.checks["real_world"].house_view_fit
    assert fit is not None and (fit.quantity, fit.max_abs_gap_bp, fit.note) == ("short_rate", 1e-12, "n")
    r = s.checks["reconciliation"]
    assert r.guarantee is not None and (r.guarantee.product, r.guarantee.maturity, r.guarantee.guaranteed_amount,
                                        r.guarantee.index_level) == ("put", 10.0, 1000.0, 1000.0)
    assert r.real_world_sample_se == 2.5 and r.rule_text == ""
    # an older entry without them: empty, absent or None, as the report showed dashes
    old = s.checks["martingale_real_world"]
    assert (old.min_ess_share, old.at_horizon.ess_share, old.not_testable, old.house_view_fit, old.guarantee,
            old.real_world_sample_se) == (None, None, (), None, None, None)


def test_the_valuation_reconciliation_and_sensitivity_totals_are_typed(tmp_path):
    change = {"value": 1000.0, "change": 20.0, "change_se_paired": 1.5, "change_se_independent": 9.0}
    data = {**VALUATION, "reconciliation": {"verdict": "inconclusive", "rule": "r", "inconclusive_lines": ["total"],
                                            "material_share": 0.02, "worst_line": "total",
                                            "max_abs_difference_in_se": 1.2},
            "sensitivities": [{"sensitivity": "rates_up", "best_estimate": change, "guarantee": {**change},
                               "tvog": {"value": 5.0, "change": -1.0}}]}
    record = read_valuation_summary(_write(tmp_path / "summary.json", data))
    rec = record.reconciled
    assert rec is not None and (rec.verdict, rec.rule, rec.inconclusive_lines, rec.material_share, rec.worst_line,
                                rec.max_abs_difference_in_se) == ("inconclusive", "r", ("total",), 0.02, "total", 1.2)
    (totals,) = record.sensitivity_totals
    assert totals.sensitivity == "rates_up" and list(totals.changes) == ["best_estimate", "guarantee", "tvog"]
    be = totals.change("best_estimate")
    assert (be.value, be.change, be.change_se_paired, be.change_se_independent) == (1000.0, 20.0, 1.5, 9.0)
    assert (totals.change("tvog").change, totals.change("tvog").change_se_paired) == (-1.0, None)
    assert read_valuation_summary(_write(tmp_path / "old.json", VALUATION)).sensitivity_totals == ()
    # a missing change is named with the file and key
    data["sensitivities"][0]["guarantee"].pop("change")
    path = _write(tmp_path / "bad.json", data)
    with pytest.raises(IntegrityError) as err:
        _ = read_valuation_summary(path).sensitivity_totals
    assert str(path) in str(err.value) and "sensitivities[0].guarantee has no key 'change'" in str(err.value)
