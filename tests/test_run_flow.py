"""The quarterly flow end to end under Prefect's test harness."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from pqflow.errors import RunDirectoryError
from pqflow.storage.jsonio import read_json
from pqflow.storage.manifest import verify_run

pytestmark = pytest.mark.flow


def _digests(run_dir: Path) -> dict[str, str]:
    return {
        p.relative_to(run_dir).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted((run_dir / "scenarios").rglob("*.parquet"))
    }


def test_flow_writes_both_sets_and_is_reproducible(prefect_harness, small_config, tmp_path, monkeypatch):
    from pqflow.pipeline import run_quarterly

    cfg = small_config()
    first = tmp_path / "run-a"
    result = run_quarterly(cfg, first, workers=2)
    assert Path(result["out_dir"]) == first.absolute()

    # Layout and content (the file layout).
    for rel in ("calibration.json", "manifest.json", "validation/martingale.csv",
                "validation/density.csv", "validation/summary.json"):
        assert (first / rel).is_file(), rel
    for measure, density in (("real_world", "q_density"), ("market_consistent", "p_density")):
        parts = sorted((first / "scenarios" / measure).glob("part-*.parquet"))
        assert len(parts) == 4
        table = pq.read_table(parts[-1])
        assert density in table.column_names
        assert table.schema.field("scenario").type == "int32"
        meta = {k.decode(): v.decode() for k, v in table.schema.metadata.items()}
        assert meta["pqflow.measure"] == measure
        assert meta["pqflow.valuation_date"] == "2026-09-30"
        scen = table.column("scenario").to_numpy()
        assert scen.min() == 300 and scen.max() == 399  # numbering runs across parts
    manifest = verify_run(first)
    assert manifest["seeds"]["root_seed"] == 20260930
    assert all(len(f["sha256"]) == 64 for f in manifest["files"])
    # no check fails; cells without the power to see a 5% deviation make it "inconclusive"
    assert read_json(first / "validation/summary.json")["verdict"] in ("pass", "inconclusive")

    # A different worker count gives the same bytes (seed tree per measure and batch).
    second = tmp_path / "run-b"
    run_quarterly(cfg, second, workers=1)
    assert _digests(first) == _digests(second)

    # Refuses an existing run directory without --overwrite, before simulating.
    with pytest.raises(RunDirectoryError, match="--overwrite"):
        run_quarterly(cfg, first)

    # A run that fails part-way leaves the earlier run exactly as it was, and no debris.
    import pqflow.jobs.run as flows  # the run's steps, which the flow's tasks wrap

    real = flows.generate_part

    def flaky(calibration, plan, measure, batch, run_dir):
        if batch.index == 2 and measure == "real_world":
            raise OSError("disk full (simulated)")
        return real(calibration, plan, measure, batch, run_dir)

    monkeypatch.setattr(flows, "generate_part", flaky)
    before = _digests(first)
    with pytest.raises(OSError, match="disk full"):
        run_quarterly(cfg, first, overwrite=True)
    assert _digests(first) == before
    verify_run(first)
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]

    # With the fault gone, overwrite replaces the run with an identical one.
    monkeypatch.setattr(flows, "generate_part", real)
    run_quarterly(cfg, first, overwrite=True)
    assert _digests(first) == before
