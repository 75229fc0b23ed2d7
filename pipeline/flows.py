"""The quarterly flow: the library's run (``pqflow.jobs.run.run_quarter``) with each step as a
Prefect task on a task runner.

The run itself (plan, lock, staging folder, resume, the order of the steps, publish) is the
library's; this module supplies the executor that turns each step into a Prefect task, the
progress display, the artifacts and the task runner. Tasks pass small records and file paths,
never large arrays; the Parquet parts are the real outputs.

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
from collections.abc import Callable, Iterable, Iterator
from contextlib import AbstractContextManager, contextmanager
from pathlib import Path
from typing import Any

from prefect import flow, task
from prefect.cache_policies import NO_CACHE
from prefect.futures import as_completed
from prefect.task_runners import ThreadPoolTaskRunner

from pqflow.jobs.run import STEPS, SerialExecutor, Step, load_run_config, run_quarter
from pqflow.pipeline.home import check_prefect_home
from pqflow.pipeline.progress import ArtifactProgress, progress_reporter, stage_reporter

__all__ = ["quarterly_run", "run_quarterly", "run_in_process", "task_runner_for"]

RUNNERS = ("threads", "dask")


# ------------------------------------------------------------------------------------ tasks


def _as_task(step: Step) -> Any:
    if step.retries:
        return task(name=step.name, cache_policy=NO_CACHE, retries=step.retries, retry_delay_seconds=1)(step.fn)
    return task(name=step.name, cache_policy=NO_CACHE)(step.fn)


#: One Prefect task per library step, by the step's name.
TASKS = {s.name: _as_task(s) for s in STEPS}
calibrate_task = TASKS["calibrate"]
generate_part_task = TASKS["generate-part"]
validate_task = TASKS["validate"]
report_task = TASKS["report"]
calibrate_sensitivity_task = TASKS["calibrate-sensitivity"]
generate_sensitivity_part_task = TASKS["generate-sensitivity-part"]
validate_sensitivity_task = TASKS["validate-sensitivity"]
manifest_task = TASKS["write-manifest"]


class PrefectExecutor:
    """The library's steps as Prefect tasks of the running flow (submitted to its task runner),
    with the terminal progress display and the UI's progress artifact."""

    def __init__(self, show_progress: bool = False) -> None:
        self.show_progress = show_progress

    def run(self, step: Step, *args: Any) -> Any:
        return TASKS[step.name](*args)

    def submit(self, step: Step, *args: Any) -> Any:
        return TASKS[step.name].submit(*args)

    def as_completed(self, handles: list[Any]) -> Iterable[Any]:
        return as_completed(handles)

    def result(self, handle: Any) -> Any:
        return handle.result()

    def settle(self, handles: list[Any]) -> None:
        _settle(handles)

    @contextmanager
    def progress(self, total: int, done: int) -> Iterator[Callable[[], None]]:
        ui = ArtifactProgress(total, done)
        with progress_reporter(total, done, self.show_progress) as advance:
            def both() -> None:
                advance()
                ui.advance()

            yield both

    def stage(self, text: str) -> AbstractContextManager[Any]:
        return stage_reporter(text, self.show_progress)


# -------------------------------------------------------------------------------- the flow


@flow(name="quarterly_run", log_prints=False, task_runner=ThreadPoolTaskRunner(max_workers=2))  # type: ignore[arg-type]  # prefect: a fresh ThreadPoolTaskRunner types as [Never]
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
    result = run_quarter(config_path, out_dir, executor=PrefectExecutor(show_progress), scenarios=scenarios,
                         seed=seed, overwrite=overwrite, resume=resume, calibration_file=calibration_file)
    _artifacts(result["summary"], result["out_dir"])
    return result


def _settle(futures: list[Any], timeout: float = 60.0) -> None:
    """After a part failed or the run was interrupted: cancel the parts not yet started and
    wait (up to ``timeout`` seconds) for those being written, so that clean-up never races a
    writer. Their own results or errors no longer matter."""
    inner = [getattr(f, "wrapped_future", None) for f in futures]
    for w in inner:
        if w is None:
            continue
        try:
            w.cancel()
        except Exception:  # noqa: BLE001 (best effort)
            pass
    deadline = time.monotonic() + timeout
    local = [w for w in inner if isinstance(w, concurrent.futures.Future)]
    concurrent.futures.wait(local, timeout=timeout)
    for f, w in zip(futures, inner, strict=True):
        if not isinstance(w, concurrent.futures.Future):
            try:
                f.wait(timeout=max(0.0, deadline - time.monotonic()))
            except BaseException:  # noqa: BLE001 (its outcome no longer matters)
                pass


def _artifacts(summary: dict[str, Any], out_dir: str) -> None:
    """The verdicts as Prefect artifacts, so the run's result shows in Prefect's UI."""
    from pqflow.pipeline.artifacts import publish_artifacts

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
    from pqflow.pipeline.server import TiedServer

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


def _drain_prefect_clients(timeout: float = 3.0) -> None:
    """Send the logs and events Prefect still queues while the temporary server listens, each
    queue waited on for at most ``timeout`` seconds (best effort: the run itself has finished).
    It called ``APILogHandler.flush()`` on the class before, an instance method: that raised,
    was swallowed, and neither queue was drained."""
    from prefect.events.worker import EventsWorker
    from prefect.logging.handlers import APILogWorker

    for worker in (APILogWorker, EventsWorker):
        try:
            worker.drain_all(timeout=timeout)
        except Exception:  # noqa: BLE001 (best effort: a failed drain must not fail a finished run)
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
    execution = load_run_config(config_path).execution
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
    """The same run as the flow, one step after another in this process, without Prefect
    (no API server, no task runner): the library's run with the serial executor, for scripts,
    tests and benchmarks. Same files, same bytes. ``filesystem``: a ``pyarrow.fs.FileSystem``
    that ``out_dir`` is a path in (else a local path or a URI)."""
    return run_quarter(config_path, out_dir, executor=SerialExecutor(), scenarios=scenarios, seed=seed,
                       overwrite=overwrite, resume=resume, filesystem=filesystem, calibration_file=calibration_file)
