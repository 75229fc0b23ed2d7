"""Faults: a run killed part-way resumes to the same bytes; concurrent runs are locked out.

The run is killed with SIGKILL (no clean-up code runs at all, as after a crash or an OOM kill)
while it executes the library-level loop ``run_in_process`` in a subprocess, so no Prefect
server is left behind (PREFECT.md: a killed local-mode flow leaves its temporary server
running). The resumed run is compared byte for byte with an uninterrupted one; the checks are
sha256 digests (FIPS 180-4, via hashlib) of every file.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from conftest import run_digests

from pqflow.errors import RunDirectoryError
from pqflow.storage.manifest import verify_run
from pqflow.storage.rundir import PROGRESS, acquire_lock, lock_path, release_lock, staging_path

REPO = Path(__file__).resolve().parents[1]
STOP_AFTER = 5  # parts finished before the run hangs and is killed (of 8)


def _digests(run_dir: Path) -> dict[str, str]:
    return run_digests(run_dir)


def _manifest_files(run_dir: Path) -> list[dict]:
    return json.loads((run_dir / "manifest.json").read_text())["files"]


def _kill_part_way(config: Path, out: Path) -> None:
    """Run the library loop in a subprocess; after STOP_AFTER parts the next part leaves a
    half-written temporary file and hangs; then SIGKILL."""
    script = textwrap.dedent(
        f"""
        import os, sys, time
        from pathlib import Path
        import pqflow.jobs.run as run
        import pqflow.pipeline.flows as flows
        from pqflow.storage.parquet import part_name
        real, done = run.generate_part, [0]
        def gated(calibration, plan, measure, batch, run_dir):
            if done[0] == {STOP_AFTER}:
                tmp = Path(run_dir) / "scenarios" / measure / f".{{part_name(batch.index)}}.tmp-{{os.getpid()}}"
                tmp.parent.mkdir(parents=True, exist_ok=True)
                tmp.write_bytes(b"PAR1 half a part")
                print("HANGING", flush=True)
                time.sleep(300)
            done[0] += 1
            return real(calibration, plan, measure, batch, run_dir)
        run.generate_part = gated
        flows.run_in_process({str(config)!r}, {str(out)!r})
        """
    )
    proc = subprocess.Popen(
        [sys.executable, "-c", script], cwd=REPO, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    try:
        line = proc.stdout.readline()
        assert line.strip() == "HANGING", proc.stderr.read()
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)
        proc.stdout.close()  # the pipes are ours to close (pytest reports unclosed files as errors)
        proc.stderr.close()
    assert proc.returncode == -signal.SIGKILL


def test_killed_run_resumes_to_identical_bytes(small_config, tmp_path):
    from pqflow.pipeline import run_in_process

    cfg = small_config()
    reference = tmp_path / "uninterrupted"
    run_in_process(cfg, reference)

    out = tmp_path / "run"
    _kill_part_way(cfg, out)
    staging = staging_path(out)
    assert not out.exists() and staging.is_dir()
    assert lock_path(out).exists()  # left by the killed process: stale, must be taken over
    records = [json.loads(x) for x in (staging / PROGRESS).read_text().splitlines()]
    parts = [r for r in records if r["kind"] == "part"]
    assert len(parts) == STOP_AFTER

    # Damage one finished part, delete another: both must be regenerated, the rest kept.
    damaged, deleted = staging / parts[0]["path"], staging / parts[1]["path"]
    data = bytearray(damaged.read_bytes())
    data[len(data) // 2] ^= 0xFF
    damaged.write_bytes(bytes(data))
    deleted.unlink()
    untouched = {r["path"]: (staging / r["path"]).stat().st_mtime_ns for r in parts[2:]}

    # A run with another configuration must not reuse these parts.
    other = small_config("other.toml", simulation={"seed": 99})
    with pytest.raises(RunDirectoryError, match="another configuration"):
        run_in_process(other, out, resume=True)

    result = run_in_process(cfg, out, resume=True)
    assert result["kept_parts"] == STOP_AFTER - 2
    assert set(result["discarded_parts"]) == {parts[0]["path"], parts[1]["path"]}
    assert len(result["regenerated_parts"]) == 8 - (STOP_AFTER - 2)  # every part not kept
    assert {parts[0]["path"], parts[1]["path"]} <= set(result["regenerated_parts"])
    assert _digests(out) == _digests(reference)
    assert _manifest_files(out) == _manifest_files(reference)
    for rel, mtime in untouched.items():
        assert (out / rel).stat().st_mtime_ns == mtime, f"{rel} was rewritten"
    verify_run(out)
    assert not staging.exists() and not lock_path(out).exists()
    assert not list(out.rglob(".*"))  # no temporary files or progress file published


def test_interrupted_run_without_resume_starts_afresh(small_config, tmp_path):
    from pqflow.pipeline import run_in_process

    cfg = small_config()
    out = tmp_path / "run"
    _kill_part_way(cfg, out)
    result = run_in_process(cfg, out)
    assert result["kept_parts"] == 0
    verify_run(out)


def test_second_writer_is_refused_while_the_first_holds_the_lock(small_config, tmp_path):
    from pqflow.pipeline import run_in_process

    cfg = small_config()
    out = tmp_path / "run"
    lock = acquire_lock(lock_path(out))  # this test process plays the first, live run
    try:
        with pytest.raises(RunDirectoryError, match=rf"another pqflow run \(pid {os.getpid()} on host"):
            run_in_process(cfg, out)
    finally:
        release_lock(lock)
    assert not out.exists()


def test_stale_and_foreign_locks(small_config, tmp_path):
    from pqflow.pipeline import run_in_process

    cfg = small_config()
    out = tmp_path / "run"
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    stale = {"pid": int(dead.stdout), "host": socket.gethostname(), "created_utc": "2026-01-01T00:00:00+00:00"}
    lock_path(out).write_text(json.dumps(stale))
    run_in_process(cfg, out)  # the dead process's lock is taken over
    verify_run(out)
    assert not lock_path(out).exists()

    foreign = {"pid": 1, "host": "another-host.invalid", "created_utc": "2026-01-01T00:00:00+00:00"}
    lock_path(out).write_text(json.dumps(foreign))
    with pytest.raises(RunDirectoryError, match="another-host.invalid.*delete"):
        run_in_process(cfg, out, overwrite=True)
    lock_path(out).unlink()


@pytest.mark.flow
def test_flow_resume_after_a_kill(prefect_harness, small_config, tmp_path):
    # The flow (what `pqflow run --resume` calls) finishes what the killed attempt left.
    from pqflow.pipeline import run_in_process, run_quarterly

    cfg = small_config()
    reference = tmp_path / "uninterrupted"
    run_in_process(cfg, reference)
    out = tmp_path / "run"
    _kill_part_way(cfg, out)
    started = time.perf_counter()
    result = run_quarterly(cfg, out, resume=True, workers=2)
    assert result["kept_parts"] == STOP_AFTER
    assert _digests(out) == _digests(reference)
    assert time.perf_counter() - started < 60


class _Interrupted(BaseException):
    """Stands for Ctrl-C in the flow's main thread: not an Exception, so the staging folder is
    kept for --resume (as after KeyboardInterrupt)."""


@pytest.mark.flow
def test_interrupted_flow_keeps_every_finished_part_and_counts_right(prefect_harness, small_config, tmp_path,
                                                                     monkeypatch):
    # The flow is interrupted after reading 2 results while the worker threads have finished 5
    # parts (the 4 real-world parts and the first market-consistent one); the other 3 fail
    # before writing anything. A resumed run must keep all 5 and regenerate the other 3: the
    # count reported once said "kept 10, regenerated 3" after 14 of 24 parts had been made,
    # because parts were recorded by the flow's loop, not where they were written.
    from typer.testing import CliRunner

    import pqflow.jobs.run as run
    import pqflow.pipeline.flows as flows
    from pqflow.cli import app

    cfg = small_config()  # 4 + 4 parts
    reference = tmp_path / "uninterrupted"
    flows.run_in_process(cfg, reference)
    out = tmp_path / "run"
    finished = {("real_world", 0), ("real_world", 1), ("real_world", 2), ("real_world", 3), ("market_consistent", 0)}
    real, real_loop = run.generate_part, flows.as_completed

    def failing(calibration, plan, measure, batch, staging):
        if (measure, batch.index) not in finished:
            raise RuntimeError("injected failure before writing")
        return real(calibration, plan, measure, batch, staging)

    def interrupted(futures):
        for fut in futures:
            fut.wait()
        yield from [f for f in futures if f.state.is_completed()][:2]
        raise _Interrupted

    monkeypatch.setattr(run, "generate_part", failing)
    monkeypatch.setattr(flows, "as_completed", interrupted)
    monkeypatch.delenv("COLUMNS", raising=False)
    with pytest.raises(_Interrupted):
        CliRunner().invoke(app, ["run", str(cfg), "--out", str(out), "--workers", "2"])
    monkeypatch.setattr(run, "generate_part", real)  # the real part generator and loop again
    monkeypatch.setattr(flows, "as_completed", real_loop)
    staging = staging_path(out)
    recorded = [json.loads(x) for x in (staging / PROGRESS).read_text().splitlines()]
    assert sorted((r["measure"], r["batch"]) for r in recorded if r["kind"] == "part") == sorted(finished)
    assert not lock_path(out).exists()

    result = CliRunner().invoke(app, ["run", str(cfg), "--out", str(out), "--resume"])
    assert result.exit_code == 0, result.output
    assert "resumed: kept 5 finished parts, regenerated 3 (of 8)" in result.output
    assert _digests(out) == _digests(reference)
    # Output that is not a terminal is not cut to 80 columns: no name is truncated.
    assert "equity wealth ratios vs AAA (2005)" in result.output and "\u2026" not in result.output
    assert "progress: 5 of 8 parts generated (5 kept from the interrupted run)" in result.output
    assert "progress: 8 of 8 parts generated" in result.output

