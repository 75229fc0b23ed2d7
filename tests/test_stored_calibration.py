"""One calibration feeds both sets: a run from a stored calibration.json needs no refit and
gives the same bytes as a run that fits."""

from __future__ import annotations

import hashlib
import json

import pytest

import pqflow.calibration.assemble as assemble
import pqflow.jobs.steps as steps
from pqflow.errors import ConfigError
from pqflow.pipeline import run_in_process


def _digests(run_dir):
    return {p.relative_to(run_dir).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted((run_dir / "scenarios").rglob("*.parquet"))}


def test_run_from_stored_calibration_does_not_refit(small_config, tmp_path, monkeypatch):
    cfg = small_config()
    fitted = tmp_path / "fitted"
    run_in_process(cfg, fitted)
    stored = fitted / "calibration.json"

    def refuse(*_a, **_k):
        raise AssertionError("the calibration was refitted")

    monkeypatch.setattr(assemble, "assemble_calibration", refuse)
    again = tmp_path / "from-stored"
    run_in_process(cfg, again, calibration_file=stored)
    assert _digests(again) == _digests(fitted)
    assert json.loads((again / "calibration.json").read_text()) == json.loads(stored.read_text())
    # Both sets of the run carry the hash of that one calibration in their metadata.
    import pyarrow.parquet as pq

    hashes = {
        pq.read_schema(p).metadata[b"pqflow.calibration_sha256"]
        for p in (again / "scenarios").rglob("*.parquet")
    }
    assert len(hashes) == 1
    assert steps is not None


def test_stored_calibration_must_fit_the_run(small_config, tmp_path):
    cfg = small_config()
    run_in_process(cfg, tmp_path / "a")
    stored = tmp_path / "a" / "calibration.json"
    other = small_config("other.toml", equity={"name": "another_index"})
    with pytest.raises(ConfigError, match="another_index"):
        run_in_process(other, tmp_path / "b", calibration_file=stored)
    assert not (tmp_path / "b").exists()
    broken = tmp_path / "broken.json"
    broken.write_text("{}")
    with pytest.raises(ConfigError, match="not a pqflow calibration file"):
        run_in_process(cfg, tmp_path / "c", calibration_file=broken)


def test_each_set_may_have_its_own_grid(small_config, tmp_path, demo_config_dict):
    # A standard quarter (common practice): a monthly real-world set for projections and a
    # longer annual market-consistent set for valuation, from one calibration.
    import copy

    import pyarrow.parquet as pq
    from conftest import write_toml

    from pqflow.config import load_config
    from pqflow.jobs import plan_run

    data = copy.deepcopy(demo_config_dict)
    data["simulation"].update({"scenarios": 200, "batch_size": 100, "horizon_years": 20})
    data["real_world"]["target_year"] = 10
    data["simulation.real_world"] = {"horizon_years": 5, "steps_per_year": 12}
    data["simulation.market_consistent"] = {"scenarios": 400}
    cfg = write_toml(tmp_path / "grids.toml", data)
    plan = plan_run(load_config(cfg))
    assert plan.times_for("real_world").size == 61 and plan.times_for("market_consistent").size == 21
    result = run_in_process(cfg, tmp_path / "run")
    assert result["summary"]["verdict"] in ("pass", "inconclusive"), result["summary"]  # no check fails
    rw = pq.read_table(tmp_path / "run/scenarios/real_world/part-00001.parquet")
    mc = pq.read_table(tmp_path / "run/scenarios/market_consistent/part-00003.parquet")
    assert rw.column("time").to_numpy().max() == 5.0 and mc.column("scenario").to_numpy().max() == 399
    manifest = json.loads((tmp_path / "run/manifest.json").read_text())
    assert manifest["scenarios"] == {"real_world": 200, "market_consistent": 400}
