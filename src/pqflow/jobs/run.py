"""One quarter's run, written once: plan, lock the target, stage, resume, run the steps, publish.

Work is built in a staging folder (``.NAME.staging`` beside the target, under a lock file) and
published by rename only when every step has succeeded, so a failed run never replaces or
damages an earlier one. Each finished part is recorded in the staging folder's progress file by
the step that wrote it; an interrupted run continues with ``resume=True``, keeping every
recorded part whose sha256 still matches and regenerating the rest.

How the steps are executed is the caller's: :func:`run_quarter` hands each :class:`Step` to an
:class:`Executor`. :class:`SerialExecutor` runs them one after another in this process (no
scheduler); the Prefect flow (``pqflow.pipeline.flows``) passes one that runs each step as a
Prefect task on its task runner. There is no second copy of the run's body: the bytes do not
depend on the executor, since each part depends only on the configuration, the seed, the
measure and the batch index.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator
from contextlib import AbstractContextManager, contextmanager, nullcontext
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any, Protocol

import numpy as np
import pyarrow as pa

from pqflow import __version__
from pqflow.calibration.assemble import Calibration
from pqflow.config.loader import apply_overrides, load_config
from pqflow.config.schema import RunConfig, SensitivitySection
from pqflow.jobs.sensitivities import (
    calibrate_sensitivity,
    generate_sensitivity_part,
    record_sensitivities,
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

__all__ = [
    "Step",
    "STEPS",
    "Executor",
    "SerialExecutor",
    "run_quarter",
    "load_run_config",
    "generate_and_record",
]


# ------------------------------------------------------------------------------------ steps


@dataclass(frozen=True)
class Step:
    """One step of a run: its name (the Prefect task's name), the plain function, and how often
    a scheduler may retry it (parts only: a part is written whole or not at all)."""

    name: str
    fn: Callable[..., Any]
    retries: int = 0


def generate_and_record(
    calibration: Calibration, plan: RunPlan, measure: str, batch: Batch, staging: str
) -> PartRecord:
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


def calibrate_sensitivity_step(
    config: RunConfig, sens: SensitivitySection, base: Calibration, staging: str, source: str
) -> Calibration:
    return calibrate_sensitivity(config, sens, base, staging, source=source)


def write_manifest_step(
    staging: str, config: RunConfig, plan: RunPlan, parts: list[PartRecord], run_id: str,
    extra_header: dict[str, Any] | None = None,
) -> dict[str, Any]:
    return write_run_manifest(staging, config, plan, parts, run_id=run_id, extra_header=extra_header)


def report_step(staging: str) -> str:
    return str(write_report(staging))


CALIBRATE = Step("calibrate", calibrate_step)
GENERATE_PART = Step("generate-part", generate_and_record, retries=2)
VALIDATE = Step("validate", validate_staged_run)
REPORT = Step("report", report_step)
CALIBRATE_SENSITIVITY = Step("calibrate-sensitivity", calibrate_sensitivity_step)
GENERATE_SENSITIVITY_PART = Step("generate-sensitivity-part", generate_sensitivity_part, retries=2)
VALIDATE_SENSITIVITY = Step("validate-sensitivity", validate_sensitivity)
WRITE_MANIFEST = Step("write-manifest", write_manifest_step)

#: Every step a run uses, for a scheduler that wraps each once (the Prefect flow's tasks).
STEPS = (CALIBRATE, GENERATE_PART, VALIDATE, REPORT, CALIBRATE_SENSITIVITY, GENERATE_SENSITIVITY_PART,
         VALIDATE_SENSITIVITY, WRITE_MANIFEST)


# -------------------------------------------------------------------------------- executors


class Executor(Protocol):
    """How a run's steps are executed. ``submit`` returns a handle whose value ``result`` gives;
    a handle may be passed as an argument of a later ``submit`` (it stands for its value)."""

    def run(self, step: Step, *args: Any) -> Any: ...

    def submit(self, step: Step, *args: Any) -> Any: ...

    def as_completed(self, handles: list[Any]) -> Iterable[Any]: ...

    def result(self, handle: Any) -> Any: ...

    def settle(self, handles: list[Any]) -> None:
        """After a failure or an interruption: cancel what has not started and wait for what is
        running, so that clean-up never races a writer."""

    def progress(self, total: int, done: int) -> AbstractContextManager[Callable[[], None]]:
        """Context giving a function called once per part generated now."""
        ...

    def stage(self, text: str) -> AbstractContextManager[Any]: ...


@dataclass(frozen=True)
class _Done:
    value: Any


class SerialExecutor:
    """Every step at once, one after another, in this process (no scheduler, no output)."""

    def run(self, step: Step, *args: Any) -> Any:
        return step.fn(*args)

    def submit(self, step: Step, *args: Any) -> _Done:
        return _Done(step.fn(*(a.value if isinstance(a, _Done) else a for a in args)))

    def as_completed(self, handles: list[Any]) -> Iterable[Any]:
        return list(handles)

    def result(self, handle: _Done) -> Any:
        return handle.value

    def settle(self, handles: list[Any]) -> None:
        return None

    def progress(self, total: int, done: int) -> AbstractContextManager[Callable[[], None]]:
        return nullcontext(lambda: None)

    def stage(self, text: str) -> AbstractContextManager[Any]:
        return nullcontext()


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


def load_run_config(config_path: str | Path, scenarios: int | None = None, seed: int | None = None) -> RunConfig:
    """The configuration at ``config_path`` with the command line's overrides applied."""
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
        state = prepare_staging(where, overwrite=overwrite, resume=resume,
                                fingerprint=_fingerprint(config, calibration_file), staging=staging)
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


# --------------------------------------------------------------------------------- the run


def run_quarter(
    config_path: str | Path,
    out_dir: str | Path,
    *,
    executor: Executor,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    resume: bool = False,
    filesystem: Any = None,
    calibration_file: str | Path | None = None,
) -> dict[str, Any]:
    """One quarter's run: both scenario sets (and every sensitivity set) from one calibration,
    validated, with a manifest and the report, published to ``out_dir`` (a local path, a URI
    pyarrow can open, or a path in ``filesystem``); ``calibration_file`` uses a stored
    calibration instead of fitting.

    Returns ``{"out_dir", "run_id", "summary", "kept_parts", "regenerated_parts",
    "discarded_parts"}``; raises before any simulation if the configuration or the output
    directory is unusable.
    """
    config = load_run_config(config_path, scenarios, seed)
    plan = plan_run(config)
    stored = str(calibration_file) if calibration_file is not None else None
    ex = executor
    with _attempt(config, out_dir, overwrite=overwrite, resume=resume, filesystem=filesystem,
                  calibration_file=calibration_file) as att:
        calibration = ex.run(CALIBRATE, config, att.staging, stored)
        todo = att.todo(plan)
        futures = [ex.submit(GENERATE_PART, calibration, plan, m, b, att.staging) for m, b in todo]
        # sensitivity sets: calibrated and simulated beside the base parts, on the same executor
        sens_cals = {
            s.name: ex.submit(CALIBRATE_SENSITIVITY, config, s, calibration, att.staging, str(config_path))
            for s in config.sensitivities
        }
        sens_futures = [
            ex.submit(GENERATE_SENSITIVITY_PART, sens_cals[s.name], plan, s.name, m, b, att.staging)
            for s in config.sensitivities for m, b in sensitivity_tasks(plan, s)
        ]
        parts = list(att.kept.values())
        with ex.progress(len(plan.tasks()), len(parts)) as advance:
            try:
                for fut in ex.as_completed(futures):
                    parts.append(ex.result(fut))
                    advance()
                sens_parts = [ex.result(f) for f in sens_futures]
            except BaseException:  # no part may still be written once the staging folder goes
                ex.settle([*futures, *sens_futures, *sens_cals.values()])
                raise
        checks = {s.name: ex.submit(VALIDATE_SENSITIVITY, att.staging, s, config) for s in config.sensitivities}
        with ex.stage("validating the written files"):
            summary = ex.run(VALIDATE, att.staging, config)
            if config.sensitivities:
                summary = record_sensitivities(att.staging, config, {k: ex.result(f) for k, f in checks.items()})
        ex.run(WRITE_MANIFEST, att.staging, config, plan, [*parts, *sens_parts], att.state.run_id,
               sensitivity_manifest_entry(config) if config.sensitivities else None)
        ex.run(REPORT, att.staging)
        final = _publish(att, overwrite)
    return _result(att, todo, final, summary)
