"""The quarterly flow: calibrate -> generate both sets in batches -> validate -> manifest.

Tasks pass small records and file paths, never large arrays; the Parquet parts are the real
outputs. Work is built in a staging folder and published by rename only when every step has
succeeded, so a failed run never replaces or damages an earlier one.
"""

from __future__ import annotations

import uuid
from pathlib import Path
from typing import Any

from prefect import flow, task
from prefect.cache_policies import NO_CACHE
from prefect.futures import as_completed
from prefect.task_runners import ThreadPoolTaskRunner

from pqflow.calibration.assemble import Calibration, assemble_calibration
from pqflow.config.loader import apply_overrides, load_config
from pqflow.config.schema import RunConfig
from pqflow.jobs.steps import (
    PartRecord,
    RunPlan,
    generate_part,
    plan_run,
    validate_staged_run,
    write_calibration,
    write_run_manifest,
)
from pqflow.simulation.plan import Batch
from pqflow.storage.rundir import discard_staging, prepare_staging, publish_staging

__all__ = ["quarterly_run", "run_quarterly"]


@task(name="calibrate", cache_policy=NO_CACHE)
def calibrate_task(config: RunConfig, staging: str) -> Calibration:
    calibration = assemble_calibration(config)
    write_calibration(staging, calibration)
    return calibration


@task(name="generate-part", cache_policy=NO_CACHE, retries=2, retry_delay_seconds=1)
def generate_part_task(
    calibration: Calibration, plan: RunPlan, measure: str, batch: Batch, staging: str
) -> PartRecord:
    return generate_part(calibration, plan, measure, batch, staging)


@task(name="validate", cache_policy=NO_CACHE)
def validate_task(staging: str, config: RunConfig) -> dict[str, Any]:
    return validate_staged_run(staging, config)


@task(name="write-manifest", cache_policy=NO_CACHE)
def manifest_task(staging: str, config: RunConfig, plan: RunPlan, parts: list[PartRecord], run_id: str) -> dict[str, Any]:
    return write_run_manifest(staging, config, plan, parts, run_id=run_id)


def _progress(total: int, enabled: bool):
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(
        TextColumn("[bold]generating scenario parts"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        disable=not enabled,
        transient=False,
    )


@flow(name="quarterly_run", log_prints=False, task_runner=ThreadPoolTaskRunner(max_workers=2))
def quarterly_run(
    config_path: str,
    out_dir: str,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    show_progress: bool = False,
) -> dict[str, Any]:
    """One quarter's run: both scenario sets from one calibration, validated, with a manifest.

    Returns ``{"out_dir", "run_id", "summary"}``; raises before any simulation if the
    configuration or the output directory is unusable.
    """
    config = load_config(config_path)
    if scenarios is not None or seed is not None:
        config = apply_overrides(config, scenarios=scenarios, seed=seed, source=config_path)
    plan = plan_run(config)
    run_id = uuid.uuid4().hex
    staging = str(prepare_staging(out_dir, overwrite=overwrite))
    try:
        calibration = calibrate_task(config, staging)
        futures = [
            generate_part_task.submit(calibration, plan, measure, batch, staging)
            for measure, batch in plan.tasks()
        ]
        parts: list[PartRecord] = []
        with _progress(len(futures), show_progress) as progress:
            bar = progress.add_task("parts", total=len(futures))
            for fut in as_completed(futures):
                parts.append(fut.result())
                progress.advance(bar)
        summary = validate_task(staging, config)
        manifest_task(staging, config, plan, parts, run_id)
        final = publish_staging(staging, out_dir, overwrite=overwrite)
    except BaseException:
        discard_staging(staging)
        raise
    return {"out_dir": str(final), "run_id": run_id, "summary": summary}


def run_quarterly(
    config_path: str | Path,
    out_dir: str | Path,
    *,
    scenarios: int | None = None,
    seed: int | None = None,
    overwrite: bool = False,
    workers: int = 2,
    show_progress: bool = False,
) -> dict[str, Any]:
    """Run the flow with a thread pool of ``workers`` (the Python entry point of ``pqflow run``)."""
    runner = ThreadPoolTaskRunner(max_workers=max(1, int(workers)))
    return quarterly_run.with_options(task_runner=runner)(
        config_path=str(config_path),
        out_dir=str(out_dir),
        scenarios=scenarios,
        seed=seed,
        overwrite=overwrite,
        show_progress=show_progress,
    )
