"""Checks computed from the written scenario files (never from the model's internals)."""

from __future__ import annotations

from pqflow.validation.checks import CheckResult
from pqflow.validation.density import density_table
from pqflow.validation.evidence import RunValidation, overall_verdict, run_checks
from pqflow.validation.market_consistency import market_consistency_check
from pqflow.validation.martingale import martingale_table
from pqflow.validation.moments import Moments
from pqflow.validation.real_world import real_world_check, wealth_ratio_benchmark
from pqflow.validation.reconciliation import reconciliation_check
from pqflow.validation.run_files import RunInputs, load_run_inputs
from pqflow.validation.summary import summarise, validate_run

__all__ = [
    "CheckResult",
    "Moments",
    "RunInputs",
    "RunValidation",
    "density_table",
    "load_run_inputs",
    "market_consistency_check",
    "martingale_table",
    "overall_verdict",
    "real_world_check",
    "reconciliation_check",
    "run_checks",
    "summarise",
    "validate_run",
    "wealth_ratio_benchmark",
]
