"""The Dask runner: parts written by worker processes are byte-identical to the in-process run.

A real local Dask cluster with two single-threaded worker processes on the loopback interface,
used through ``DaskTaskRunner(address=...)`` under the Prefect test harness. The reference is
the run without Prefect (``run_in_process``), compared by sha256 (FIPS 180-4, via hashlib).
"""

from __future__ import annotations

import json
import logging
from pathlib import Path

import pytest
from conftest import run_digests

pytestmark = pytest.mark.flow


def _digests(run_dir: Path) -> dict[str, str]:
    return run_digests(run_dir)


def _laws_cached() -> int:
    from pqflow.simulation import engine

    return len(engine._LAWS)


def test_dask_workers_write_the_same_bytes(prefect_harness, small_config, tmp_path, monkeypatch):
    pytest.importorskip("prefect_dask")
    monkeypatch.setenv("DASK_LOGGING__DISTRIBUTED", "warning")
    distributed = pytest.importorskip("distributed")
    logging.getLogger("distributed").setLevel(logging.WARNING)
    from pqflow.pipeline import run_in_process, run_quarterly

    cfg = small_config(simulation={"scenarios": 800, "batch_size": 100})  # 16 parts
    reference = tmp_path / "in-process"
    run_in_process(cfg, reference)

    with distributed.LocalCluster(
        n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None,
        host="127.0.0.1", local_directory=str(tmp_path / "dask-scratch"),
    ) as cluster, distributed.Client(cluster) as client:
        out = tmp_path / "dask"
        result = run_quarterly(cfg, out, runner="dask", dask_address=cluster.scheduler_address)
        busy = client.run(_laws_cached)  # each worker computed step laws: both simulated parts
    assert len(busy) == 2 and all(n > 0 for n in busy.values()), busy
    assert result["summary"]["verdict"] in ("pass", "inconclusive")  # no check fails
    assert _digests(out) == _digests(reference)
    files = lambda d: json.loads((d / "manifest.json").read_text())["files"]  # noqa: E731
    assert files(out) == files(reference)


def test_runner_choice_is_checked(small_config):
    from pqflow.pipeline.flows import task_runner_for

    with pytest.raises(ValueError, match="unknown task runner"):
        task_runner_for("processes", workers=2)
    with pytest.raises(ValueError, match="needs the dask runner"):
        task_runner_for("threads", workers=2, dask_address="tcp://127.0.0.1:1")
    from pqflow.config.loader import load_config
    from pqflow.errors import ConfigError

    bad = small_config("bad.toml", execution={"runner": "threads", "dask_address": "tcp://127.0.0.1:1"})
    with pytest.raises(ConfigError, match="dask_address goes with runner"):
        load_config(bad)
