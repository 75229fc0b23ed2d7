"""The steps of a quarterly run as plain functions; ``pipeline/`` wraps each in a Prefect task."""

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
