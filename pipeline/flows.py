"""The quarterly flow: calibrate -> generate both sets in batches -> validate -> manifest.

Tasks pass small records and file paths, never large arrays; the Parquet parts are the real
outputs. Work is built in a staging folder (``.NAME.staging`` beside the target, under a lock
file) and published by rename only when every step has succeeded, so a failed run never
replaces or damages an earlier one. Each finished part is recorded in the staging folder's
progress file; an interrupted run continues with ``resume=True`` (``pqflow run --resume``),
keeping every recorded part whose sha256 still matches and regenerating the rest.

Parts are scheduled on a thread pool (default) or on Dask (``runner="dask"``: a local cluster
of worker processes, or an existing scheduler). The bytes do not depend on the runner: each
part depends only on the configuration, the seed, the measure and the batch index.
"""

from __future__ import annotations

import concurrent.futures
import os
import signal
import tempfile
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
from prefect import flow, task
from prefect.cache_policies import NO_CACHE
from prefect.futures import as_completed
from prefect.task_runners import ThreadPoolTaskRunner

from pipeline.home import check_prefect_home
from pipeline.progress import ArtifactProgress, progress_reporter, stage_reporter
from pqflow import __version__
from pqflow.calibration.assemble import Calibration
from pqflow.config.loader import apply_overrides, load_config
from pqflow.config.schema import RunConfig, SensitivitySection
from pqflow.jobs.sensitivities import (
    calibrate_sensitivity,
    generate_sensitivity_part,
    record_sensitivities,
    run_sensitivities,
    sensitivity_tasks,
    validate_sensitivity,
)
from pqflow.jobs.sensitivities import manifest_entry as sensitivity_manifest_entry
from pqflow.jobs.steps import (
    PartRecord,
    RunPlan,
    calibrate_step,
    generate_part,
    plan_run,
    validate_staged_run,
    write_run_manifest,
)
from pqflow.report import write_report
from pqflow.simulation.plan import Batch
from pqflow.storage.filesystem import (
    OutputTarget,
    check_remote_target,
    publish_to_filesystem,
    remote_staging,
    resolve_target,
    target_lock_path,
)
from pqflow.storage.parquet import file_sha256, part_name
from pqflow.storage.rundir import (
    StagingState,
    acquire_lock,
    discard_staging,
    fingerprint_of,
    prepare_staging,
    publish_staging,
    record_part,
    release_lock,
)

__all__ = ["quarterly_run", "run_quarterly", "run_in_process", "task_runner_for"]

RUNNERS = ("threads", "dask")


# ------------------------------------------------------------------------------------ tasks


@task(name="calibrate", cache_policy=NO_CACHE)
def calibrate_task(config: RunConfig, staging: str, calibration_file: str | None = None) -> Calibration:
    return calibrate_step(config, staging, calibration_file)


@task(name="generate-part", cache_policy=NO_CACHE, retries=2, retry_delay_seconds=1)
def generate_part_task(
    calibration: Calibration, plan: RunPlan, measure: str, batch: Batch, staging: str
) -> PartRecord:
    return _generate_and_record(calibration, plan, measure, batch, staging)


@task(name="validate", cache_policy=NO_CACHE)
def validate_task(staging: str, config: RunConfig) -> dict[str, Any]:
    return validate_staged_run(staging, config)


@task(name="report", cache_policy=NO_CACHE)
def report_task(staging: str) -> str:
    return str(write_report(staging))


@task(name="calibrate-sensitivity", cache_policy=NO_CACHE)
def calibrate_sensitivity_task(
    config: RunConfig, sens: SensitivitySection, base: Calibration, staging: str, source: str
) -> Calibration:
    return calibrate_sensitivity(config, sens, base, staging, source=source)


@task(name="generate-sensitivity-part", cache_policy=NO_CACHE, retries=2, retry_delay_seconds=1)
def generate_sensitivity_part_task(
    calibration: Calibration, plan: RunPlan, name: str, measure: str, batch: Batch, staging: str
) -> PartRecord:
    return generate_sensitivity_part(calibration, plan, name, measure, batch, staging)


@task(name="validate-sensitivity", cache_policy=NO_CACHE)
def validate_sensitivity_task(staging: str, sens: SensitivitySection, config: RunConfig) -> dict[str, Any]:
    return validate_sensitivity(staging, sens, config)


@task(name="write-manifest", cache_policy=NO_CACHE)
def manifest_task(
    staging: str, config: RunConfig, plan: RunPlan, parts: list[PartRecord], run_id: str,
    extra_header: dict[str, Any] | None = None,
) -> dict[str, Any]:
    return write_run_manifest(staging, config, plan, parts, run_id=run_id, extra_header=extra_header)


# --------------------------------------------------------------------- one attempt at a run


@dataclass(frozen=True, kw_only=True)
class _Attempt:
    target: OutputTarget
    state: StagingState
    kept: dict[tuple[str, int], PartRecord]

    @property
    def staging(self) -> str:
        return str(self.state.path)

    def todo(self, plan: RunPlan) -> list[tuple[str, Batch]]:
        return [(m, b) for m, b in plan.tasks() if (m, b.index) not in self.kept]


def _load(config_path: str | Path, scenarios: int | None, seed: int | None) -> RunConfig:
    config = load_config(config_path)
    if scenarios is not None or seed is not None:
        config = apply_overrides(config, scenarios=scenarios, seed=seed, source=str(config_path))
    return config


def _fingerprint(config: RunConfig, calibration_file: str | Path | None = None) -> str:
    """What the parts' bytes depend on: the configuration (scheduling aside), a stored
    calibration if one is used, and the versions."""
    data = config.model_dump(mode="json")
    data.pop("execution", None)
    stored = file_sha256(calibration_file) if calibration_file is not None else None
    return fingerprint_of({"config": data, "calibration_file": stored, "pqflow": __version__,
                           "numpy": np.__version__, "pyarrow": pa.__version__})


@contextmanager
def _attempt(
    config: RunConfig, out_dir: str | Path, *, overwrite: bool, resume: bool, filesystem: Any = None,
    calibration_file: str | Path | None = None,
) -> Iterator[_Attempt]:
    """Lock the target, get the staging folder ready (resuming if asked), clean up on failure.

    An exception deletes the staging folder; an interruption (Ctrl-C, SystemExit, or a kill,
    which runs no code at all) leaves it for ``resume``.
    """
    target = resolve_target(out_dir, filesystem=filesystem)
    lock = target_lock_path(target)
    if target.is_local:
        staging, where = None, target.local
    else:
        check_remote_target(target, overwrite)
        staging = remote_staging(target)
        where = staging
    acquire_lock(lock, target=target.text)
    try:
        state = prepare_staging(
            where, overwrite=overwrite, resume=resume, fingerprint=_fingerprint(config, calibration_file), staging=staging
        )
        kept = {
            (r["measure"], int(r["batch"])): PartRecord(
                measure=r["measure"], batch=int(r["batch"]), path=r["path"], rows=int(r["rows"]), sha256=r["sha256"]
            )
            for r in state.kept
        }
        try:
            yield _Attempt(target=target, state=state, kept=kept)
        except Exception:
            discard_staging(state.path)
            raise
    finally:
        release_lock(lock)


def _generate_and_record(calibration: Calibration, plan: RunPlan, measure: str, batch: Batch, staging: str) -> PartRecord:
    """Generate one part and record it in the progress file as soon as it is in place, where it
    was generated: a part finished while the caller is interrupted is then still kept by a
    resumed run (recording from the caller's loop lost every part finished after it stopped
    reading results)."""
    rec = generate_part(calibration, plan, measure, batch, staging)
    expected = f"scenarios/{rec.measure}/{part_name(rec.batch)}"
    if rec.path != expected:
        raise RuntimeError(f"part written to {rec.path}, expected {expected}")
    record_part(staging, asdict(rec))
    return rec


def _result(att: _Attempt, todo: list[tuple[str, Batch]], final: str, summary: dict[str, Any]) -> dict[str, Any]:
    """What a run returns; the part counts say what this attempt did: ``kept_parts`` finished
    parts kept from an interrupted attempt, ``regenerated_parts`` the parts generated now (every
    part not kept), ``discarded_parts`` the damaged, missing or unrecorded files thrown away."""
    return {
        "out_dir": final,
        "run_id": att.state.run_id,
        "summary": summary,
        "kept_parts": len(att.kept),
        "regenerated_parts": [f"scenarios/{m}/{part_name(b.index)}" for m, b in todo],
        "discarded_parts": list(att.state.discarded),
    }


def _publish(attempt: _Attempt, overwrite: bool) -> str:
    if attempt.target.is_local:
        return str(publish_staging(attempt.staging, attempt.target.local, overwrite=overwrite))
    published = publish_to_filesystem(attempt.staging, attempt.target, overwrite=overwrite)
    discard_staging(attempt.staging)
    return published


# -------------------------------------------------------------------------------- the flow


@flow(name="quarterly_run", log_prints=False, task_runner=ThreadPoolTaskRunner(max_workers=2))
def quarterly_run(
    config_path: str,
    out_dir: str,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    show_progress: bool = False,
    resume: bool = False,
    calibration_file: str | None = None,
) -> dict[str, Any]:
    """One quarter's run: both scenario sets from one calibration, validated, with a manifest
    and the report; ``calibration_file`` uses a stored calibration instead of fitting.

    Returns ``{"out_dir", "run_id", "summary", "kept_parts", "regenerated_parts",
    "discarded_parts"}``; raises before any simulation if the configuration or the output
    directory is unusable. ``show_progress``: a bar on a terminal, plain lines every few
    seconds otherwise (pipeline/progress.py).
    """
    config = _load(config_path, scenarios, seed)
    plan = plan_run(config)
    with _attempt(config, out_dir, overwrite=overwrite, resume=resume, calibration_file=calibration_file) as att:
        calibration = calibrate_task(config, att.staging, calibration_file)
        todo = att.todo(plan)
        futures = [generate_part_task.submit(calibration, plan, m, b, att.staging) for m, b in todo]
        # sensitivity sets: calibrated and simulated beside the base parts, on the same runner
        sens_cals = {
            s.name: calibrate_sensitivity_task.submit(config, s, calibration, att.staging, str(config_path))
            for s in config.sensitivities
        }
        sens_futures = [
            generate_sensitivity_part_task.submit(sens_cals[s.name], plan, s.name, m, b, att.staging)
            for s in config.sensitivities for m, b in sensitivity_tasks(plan, s)
        ]
        parts = list(att.kept.values())
        ui = ArtifactProgress(len(plan.tasks()), len(parts))
        with progress_reporter(len(plan.tasks()), len(parts), show_progress) as advance:
            try:
                for fut in as_completed(futures):
                    parts.append(fut.result())
                    advance()
                    ui.advance()
                sens_parts = [f.result() for f in sens_futures]
            except BaseException:
                _settle([*futures, *sens_futures, *sens_cals.values()])  # no part may still be written once the staging folder goes
                raise
        checks = {s.name: validate_sensitivity_task.submit(att.staging, s, config) for s in config.sensitivities}
        with stage_reporter("validating the written files", show_progress):
            summary = validate_task(att.staging, config)
            if config.sensitivities:
                summary = record_sensitivities(att.staging, config, {k: f.result() for k, f in checks.items()})
        manifest_task(att.staging, config, plan, [*parts, *sens_parts], att.state.run_id,
                      sensitivity_manifest_entry(config) if config.sensitivities else None)
        report_task(att.staging)
        final = _publish(att, overwrite)
    _artifacts(summary, final)
    return _result(att, todo, final, summary)


def _settle(futures: list[Any], timeout: float = 60.0) -> None:
    """After a part failed or the run was interrupted: cancel the parts not yet started and
    wait (up to ``timeout`` seconds) for those being written, so that clean-up never races a
    writer. Their own results or errors no longer matter."""
    inner = [getattr(f, "wrapped_future", None) for f in futures]
    for w in inner:
        try:
            w.cancel()
        except Exception:  # noqa: BLE001 (best effort)
            pass
    deadline = time.monotonic() + timeout
    local = [w for w in inner if isinstance(w, concurrent.futures.Future)]
    concurrent.futures.wait(local, timeout=timeout)
    for f, w in zip(futures, inner):
        if not isinstance(w, concurrent.futures.Future):
            try:
                f.wait(timeout=max(0.0, deadline - time.monotonic()))
            except BaseException:  # noqa: BLE001 (its outcome no longer matters)
                pass


def _artifacts(summary: dict[str, Any], out_dir: str) -> None:
    """The verdicts as Prefect artifacts, so the run's result shows in Prefect's UI."""
    from pipeline.artifacts import publish_artifacts

    publish_artifacts(summary, str(Path(out_dir) / "validation" / "report.html"))


# ------------------------------------------------------------------------------ task runners


def _dask_scratch() -> str:
    uid = os.getuid() if hasattr(os, "getuid") else "user"
    path = Path(tempfile.gettempdir()) / f"pqflow-dask-{uid}"
    path.mkdir(parents=True, exist_ok=True)
    return str(path)


def local_cluster_without_ctrl_c(**kwargs: Any) -> Any:
    """A Dask ``LocalCluster`` whose worker processes ignore Ctrl-C: the terminal sends it to
    the whole process group, and the workers would die printing their own tracebacks while
    the run shuts the cluster down in order. (Started with SIGINT ignored, Python keeps it
    ignored in the spawned workers.)"""
    from distributed import LocalCluster

    if threading.current_thread() is not threading.main_thread():
        return LocalCluster(**kwargs)
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        return LocalCluster(**kwargs)
    finally:
        signal.signal(signal.SIGINT, previous)


def task_runner_for(runner: str, *, workers: int, dask_address: str | None = None):
    """The Prefect task runner for ``runner``: ``"threads"`` (``workers`` threads) or ``"dask"``
    (a local cluster of ``workers`` single-threaded processes, or the scheduler at
    ``dask_address``)."""
    if runner == "threads":
        if dask_address:
            raise ValueError("a Dask address needs the dask runner")
        return ThreadPoolTaskRunner(max_workers=max(1, int(workers)))
    if runner != "dask":
        raise ValueError(f"unknown task runner {runner!r}: use one of {RUNNERS}")
    os.environ.setdefault("DASK_LOGGING__DISTRIBUTED", "warning")
    try:
        from prefect_dask import DaskTaskRunner
    except ImportError:
        raise ValueError("the dask runner needs prefect-dask: pip install 'pqflow[dask]'") from None
    if dask_address:
        return DaskTaskRunner(address=dask_address)
    return DaskTaskRunner(
        cluster_class=local_cluster_without_ctrl_c,
        cluster_kwargs={
            "n_workers": max(1, int(workers)),
            "processes": True,
            "threads_per_worker": 1,
            "dashboard_address": None,
            "local_directory": _dask_scratch(),
        }
    )


@contextmanager
def _shared_api(needed: bool) -> Iterator[None]:
    """With no Prefect API configured, start one temporary API server (tied to this process:
    ``pipeline/server.py``) and hand its URL to every process (worker processes would otherwise
    each start their own, and Prefect's own would die with a Ctrl-C and outlive a kill)."""
    from prefect.settings import PREFECT_API_URL, get_current_settings, temporary_settings

    if not needed or get_current_settings().api.url:
        yield
        return
    from pipeline.server import TiedServer

    server = TiedServer()  # in its own session, dies with this process
    server.start()
    before = os.environ.get("PREFECT_API_URL")
    os.environ["PREFECT_API_URL"] = server.api_url  # inherited by spawned local workers
    try:
        with temporary_settings(updates={PREFECT_API_URL: server.api_url}):
            yield
    finally:
        _drain_prefect_clients()  # send what is queued while the server still listens
        if before is None:
            os.environ.pop("PREFECT_API_URL", None)
        else:
            os.environ["PREFECT_API_URL"] = before
        server.stop()


def _drain_prefect_clients() -> None:
    try:
        from prefect.events.worker import EventsWorker
        from prefect.logging.handlers import APILogHandler

        APILogHandler.flush()
        EventsWorker.drain_all(timeout=5)
    except Exception:  # noqa: BLE001 (best effort: the run itself has finished)
        pass


def run_quarterly(
    config_path: str | Path,
    out_dir: str | Path,
    *,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    workers: int | None = None,
    show_progress: bool = False,
    resume: bool = False,
    runner: str | None = None,
    dask_address: str | None = None,
    calibration_file: str | Path | None = None,
) -> dict[str, Any]:
    """Run the flow (the Python entry point of ``pqflow run``).

    ``runner``, ``workers`` and ``dask_address`` override the configuration's ``[execution]``
    section (defaults: threads, 2 workers). ``out_dir`` is a local path or a URI that pyarrow
    can open (``s3://bucket/prefix``).
    """
    check_prefect_home()  # before Prefect reads a profile from it
    execution = load_config(config_path).execution
    kind = runner or ("dask" if dask_address else execution.runner)
    address = dask_address if dask_address is not None else execution.dask_address
    n = workers if workers is not None else execution.workers
    task_runner = task_runner_for(kind, workers=n, dask_address=address if kind == "dask" else None)
    with _shared_api(True):
        return quarterly_run.with_options(task_runner=task_runner)(
            config_path=str(config_path),
            out_dir=str(out_dir),
            scenarios=scenarios,
            seed=seed,
            overwrite=overwrite,
            show_progress=show_progress,
            resume=resume,
            calibration_file=str(calibration_file) if calibration_file is not None else None,
        )


def run_in_process(
    config_path: str | Path,
    out_dir: str | Path,
    *,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    resume: bool = False,
    filesystem: Any = None,
    calibration_file: str | Path | None = None,
) -> dict[str, Any]:
    """The same run as the flow, one part after another in this process, without Prefect
    (no API server, no task runner): for scripts, tests and benchmarks. Same files, same bytes.
    ``filesystem``: a ``pyarrow.fs.FileSystem`` that ``out_dir`` is a path in (else a local path
    or a URI)."""
    config = _load(config_path, scenarios, seed)
    plan = plan_run(config)
    with _attempt(config, out_dir, overwrite=overwrite, resume=resume, filesystem=filesystem,
                  calibration_file=calibration_file) as att:
        calibration = calibrate_step(config, att.staging, calibration_file)
        parts = list(att.kept.values())
        todo = att.todo(plan)
        for m, b in todo:
            parts.append(_generate_and_record(calibration, plan, m, b, att.staging))
        summary = validate_staged_run(att.staging, config)
        sens_parts, sens_summary = run_sensitivities(config, calibration, plan, att.staging, source=str(config_path))
        summary = sens_summary or summary
        write_run_manifest(att.staging, config, plan, [*parts, *sens_parts], run_id=att.state.run_id,
                           extra_header=sensitivity_manifest_entry(config) if config.sensitivities else None)
        write_report(att.staging)
        final = _publish(att, overwrite)
    return _result(att, todo, final, summary)
