"""The steps of a quarterly run as plain functions, and the run itself (``run.py``: serially here;
``pqflow.pipeline`` runs each step as a Prefect task)."""

from __future__ import annotations

from pqflow.jobs.steps import (
    PartRecord,
    RunPlan,
    calibrate_step,
    generate_part,
    plan_run,
    validate_staged_run,
    write_calibration,
    write_run_manifest,
)

__all__ = [
    "PartRecord",
    "RunPlan",
    "calibrate_step",
    "generate_part",
    "plan_run",
    "validate_staged_run",
    "write_calibration",
    "write_run_manifest",
]
