"""The attribution flow of ``pqflow compare --attribute``: one run and valuation per step.

The steps' configurations are written first (:func:`pqflow.report.attribution.prepare_attribution`);
each step is then an independent task (calibrate, simulate with the old run's seeds, validate,
publish, value the portfolio), so a thread pool runs them side by side; the table of changes
is built from the finished runs (:func:`pqflow.report.attribution.summarise_attribution`).
Every intermediate run stays in ``OUT/steps/NN-name`` with its manifest and valuation manifest.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prefect import flow, task
from prefect.cache_policies import NO_CACHE
from prefect.task_runners import ThreadPoolTaskRunner

from pqflow.liabilities.job import value_liabilities_cli
from pqflow.report.attribution import PlannedStep, prepare_attribution, summarise_attribution

__all__ = ["attribute_change"]


@task(name="attribution-step", cache_policy=NO_CACHE)
def run_step_task(step: PlannedStep, liabilities: str) -> str:
    from pqflow.pipeline.flows import run_in_process

    run_in_process(step.config, step.run_dir)
    value_liabilities_cli(step.run_dir, liabilities)
    return str(step.run_dir)


@flow(name="attribute_change", log_prints=False, task_runner=ThreadPoolTaskRunner(max_workers=2))  # type: ignore[arg-type]  # prefect: a fresh ThreadPoolTaskRunner types as [Never]
def attribute_change(old_run: str, new_run: str, old_config: str, new_config: str, liabilities: str,
                     out_dir: str) -> dict[str, Any]:
    """Step-wise attribution of the liability change from ``old_run`` to ``new_run``."""
    planned = prepare_attribution(old_run, new_run, old_config, new_config, out_dir)
    futures = [run_step_task.submit(step, str(liabilities)) for step in planned]
    for f in futures:
        f.result()
    return summarise_attribution(old_run, new_run, planned, liabilities, Path(out_dir))
