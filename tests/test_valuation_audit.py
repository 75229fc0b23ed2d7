"""The valuation's audit trail: written like a run, checked like a run.

References used below:
- sha256 of each file (FIPS 180-4, through Python's ``hashlib``) recorded in a manifest and
  checked on reading (common practice for an audit trail; the run directory's own rule).
- "A failed run never corrupts or deletes earlier output" (the project's rule): a valuation
  that fails, or is refused, leaves the earlier results byte for byte.
"""

from __future__ import annotations

import hashlib
import json
import shutil
from pathlib import Path

import pytest
from test_validation_checks import build_run

from pqflow.errors import IntegrityError, RunDirectoryError
from pqflow.liabilities import value_liabilities_cli
from pqflow.storage.valuation_files import verify_valuation

REPO = Path(__file__).resolve().parents[1]
BOOK = REPO / "scenario_configs" / "demo_liabilities.toml"

__all__: list[str] = []


@pytest.fixture(scope="module")
def valued(tmp_path_factory, demo_config_dict) -> Path:
    run = build_run(tmp_path_factory.mktemp("audit"), demo_config_dict, scenarios=200, horizon=25)
    value_liabilities_cli(run, BOOK)
    return run


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def _strings(obj):
    if isinstance(obj, dict):
        for v in obj.values():
            yield from _strings(v)
    elif isinstance(obj, list):
        for v in obj:
            yield from _strings(v)
    elif isinstance(obj, str):
        yield obj


def test_every_output_is_in_the_valuation_manifest_with_its_checksum(valued):
    out = valued / "valuation"
    manifest = json.loads((out / "manifest.json").read_text())
    files = {e["path"]: e for e in manifest["files"]}
    assert set(files) == {"summary.json", "liability_values.parquet", "liability_values.csv",
                          "liability_cash_flows.parquet", "liability_cash_flows.csv"}
    for name, entry in files.items():
        data = (out / name).read_bytes()
        assert entry["bytes"] == len(data)
        assert entry["sha256"] == hashlib.sha256(data).hexdigest()  # FIPS 180-4 via hashlib
    assert manifest["run_manifest_sha256"] == hashlib.sha256((valued / "manifest.json").read_bytes()).hexdigest()
    assert manifest["portfolio_sha256"] == hashlib.sha256(BOOK.read_bytes()).hexdigest()
    assert verify_valuation(valued)["files"] == manifest["files"]
    assert not [p for p in valued.iterdir() if p.name.startswith(".valuation")]  # no staging or lock left


def test_no_absolute_path_in_the_valuation_summary(valued):
    summary = json.loads((valued / "valuation" / "summary.json").read_text())
    texts = list(_strings(summary))
    assert not [t for t in texts if t.startswith("/") or str(valued) in t or str(REPO) in t]
    assert summary["portfolio_file"] == "demo_liabilities.toml"
    assert set(summary["files"]) >= {"liability_values.csv", "summary.json", "manifest.json"}


def test_earlier_results_are_kept_unless_overwrite(valued, tmp_path):
    run = tmp_path / "run"
    shutil.copytree(valued, run)
    before = _snapshot(run / "valuation")
    with pytest.raises(RunDirectoryError, match="already holds valuation results; pass --overwrite"):
        value_liabilities_cli(run, BOOK)
    assert _snapshot(run / "valuation") == before
    value_liabilities_cli(run, BOOK, overwrite=True)
    assert verify_valuation(run) is not None
    assert not [p for p in run.iterdir() if p.name.startswith(".valuation")]


def test_a_failed_valuation_leaves_the_earlier_one_untouched(valued, tmp_path, monkeypatch):
    import pqflow.liabilities.job as job

    run = tmp_path / "run"
    shutil.copytree(valued, run)
    before = _snapshot(run / "valuation")

    def broken(*args, **kwargs):
        raise OSError("disk full (planted)")

    monkeypatch.setattr(job, "write_result_tables", broken)
    with pytest.raises(OSError, match="planted"):
        value_liabilities_cli(run, BOOK, overwrite=True)
    assert _snapshot(run / "valuation") == before
    assert not [p for p in run.iterdir() if p.name.startswith(".valuation")]  # staging and lock gone


def test_verify_names_a_changed_file_an_extra_file_and_a_foreign_valuation(valued, tmp_path, demo_config_dict):
    from typer.testing import CliRunner

    from pqflow.cli import app

    run = tmp_path / "run"
    shutil.copytree(valued, run)
    csv = run / "valuation" / "liability_values.csv"
    csv.write_text(csv.read_text().replace("unit_linked_gmmb", "unit_linked_gmmX", 1))
    with pytest.raises(IntegrityError, match=r"liability_values.csv: content changed"):
        verify_valuation(run)
    result = CliRunner().invoke(app, ["verify", str(run)])
    assert result.exit_code == 2 and "liability_values.csv" in result.output
    report = CliRunner().invoke(app, ["report", str(run)])  # reading commands check it too
    assert report.exit_code == 2

    shutil.copy2(valued / "valuation" / "liability_values.csv", csv)
    (run / "valuation" / "notes.txt").write_text("added later")
    with pytest.raises(IntegrityError, match=r"notes.txt: not in the valuation manifest"):
        verify_valuation(run)
    (run / "valuation" / "notes.txt").unlink()
    verify_valuation(run)

    (tmp_path / "o").mkdir()
    other = build_run(tmp_path / "o", demo_config_dict, scenarios=200, horizon=25, seed=11, name="other")
    shutil.copytree(run / "valuation", other / "valuation")
    with pytest.raises(IntegrityError, match="valued a different run"):
        verify_valuation(other)
