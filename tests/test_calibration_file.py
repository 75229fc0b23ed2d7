"""calibration.json through storage/calibration_file.py: the version field, what older and newer
files give, the typed views, and that the writer changes nothing but the added version line.

Common practice for versioned file formats (a reader accepts what it knows, names the file and
refuses what it does not; a missing version means the first format) rather than a published
source; the values checked are the ones written into each test's own file.
"""

from __future__ import annotations

import json

import pytest

from pqflow.calibration.assemble import load_calibration
from pqflow.errors import ConfigError
from pqflow.storage.calibration_file import (
    FORMAT_VERSION,
    calibration_document,
    calibration_path,
    calibration_record,
    read_calibration_file,
    write_calibration_file,
)
from pqflow.storage.jsonio import write_json_atomic

__all__: list[str] = []


def _content() -> dict:
    return calibration_document(
        pqflow_version="0.0-test", valuation_date="2025-12-31", horizon_years=30.0, inputs_sha256="abc",
        inputs={"real_world": {"equity_risk_premium": 0.04}},
        parameters={
            "curve": {"kind": "log_discount", "times": [1.0], "discount_factors": [0.97]},
            "rates_model": "g2pp",
            "g2pp": {"a": 0.5, "sigma": 0.01, "b": 0.05, "eta": 0.008, "rho": -0.7},
            "equity": {"name": "veld", "level": 100.0, "dividend_yield": 0.02, "volatility": 0.18,
                       "correlation_with_rates": 0.1, "correlation_with_rate_factors": [0.1, 0.05]},
            "stochastic_volatility": {"veld": {"v0": 0.04}},
        },
        fit={"g2pp": {"rmse_bp": 1.5}},
        instruments={"swaptions": [{"expiry": 5.0, "tenor": 5.0}], "equity_options": []},
        expected_short_rate={"time": [0.0, 1.0]},
    )


def test_the_writer_adds_only_the_version_line_first(tmp_path):
    content = _content()
    old = write_json_atomic(tmp_path / "old.json", content).read_text(encoding="utf-8").splitlines()
    new = write_calibration_file(tmp_path / "calibration.json", content).read_text(encoding="utf-8").splitlines()
    assert new[0] == "{" and new[1] == f'  "format_version": {FORMAT_VERSION},'
    assert [new[0], *new[2:]] == old  # every other line, in order, as before
    assert list(json.loads("\n".join(new)))[:2] == ["format_version", "pqflow_version"]


def test_typed_views_read_what_was_written(tmp_path):
    path = write_calibration_file(calibration_path(tmp_path), _content())
    rec = read_calibration_file(tmp_path)  # a run directory or the file itself
    assert rec.format_version == FORMAT_VERSION and rec.source == str(path)
    assert rec.valuation_date == "2025-12-31" and rec.horizon_years == 30.0 and rec.inputs_sha256 == "abc"
    assert rec.rates_model == "g2pp" and rec.hull_white is None
    g = rec.g2pp
    assert g is not None and (g.a, g.sigma, g.b, g.eta, g.rho) == (0.5, 0.01, 0.05, 0.008, -0.7)
    eq = rec.core_index
    got = (eq.name, eq.level, eq.dividend_yield, eq.correlation_with_rate_factors)
    assert got == ("veld", 100.0, 0.02, (0.1, 0.05))
    assert eq.column == "equity_veld"
    assert rec.equity_risk_premium == 0.04
    assert rec.instrument_list("swaptions") == [{"expiry": 5.0, "tenor": 5.0}]
    assert rec.instrument_list("inflation_caps") == []
    assert rec.part_fit("g2pp") == {"rmse_bp": 1.5} and rec.part_fit("equity") == {}
    assert set(rec.stochastic_volatility) == {"veld"} and rec.inflation is None and rec.credit is None
    assert rec.curve["kind"] == "log_discount"


def test_a_file_without_the_version_field_is_version_1(tmp_path):
    # every run written before the field existed must keep loading
    path = write_json_atomic(tmp_path / "calibration.json", _content())
    assert "format_version" not in json.loads(path.read_text())
    assert read_calibration_file(path).format_version == 1


@pytest.mark.parametrize("version, words", [
    (FORMAT_VERSION + 1, "is newer than this pqflow reads"),
    ("1", "is not a calibration file version"),
    (0, "is not a calibration file version"),
    (True, "is not a calibration file version"),
])
def test_an_unknown_version_is_refused_naming_the_file(tmp_path, version, words):
    path = write_json_atomic(tmp_path / "calibration.json", {"format_version": version, **_content()})
    with pytest.raises(ConfigError, match=words) as info:
        read_calibration_file(path)
    assert str(path) in str(info.value)
    with pytest.raises(ConfigError, match=words):  # the stored calibration a run is given, too
        load_calibration(path)


def test_a_missing_key_names_the_file_and_the_key(tmp_path):
    content = _content()
    del content["parameters"]["curve"]
    del content["parameters"]["equity"]["level"]
    rec = calibration_record(content, tmp_path / "calibration.json")
    named = r"calibration\.json: not a pqflow calibration file \(no parameters\."
    with pytest.raises(ConfigError, match=named + r"curve\)"):
        _ = rec.curve
    with pytest.raises(ConfigError, match=named + r"equity\.level\)"):
        _ = rec.core_index


def test_not_json_and_not_found_are_named(tmp_path):
    bad = tmp_path / "calibration.json"
    bad.write_text("{not json", encoding="utf-8")
    with pytest.raises(ConfigError, match="not a pqflow calibration file") as info:
        read_calibration_file(bad)
    assert str(bad) in str(info.value)
    with pytest.raises(ConfigError, match="calibration file not found"):
        read_calibration_file(tmp_path / "nowhere.json")
    with pytest.raises(ConfigError, match="not a JSON object"):
        calibration_record([1, 2], bad)
