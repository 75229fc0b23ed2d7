"""Checks computed from the written scenario files (never from the model's internals)."""

from __future__ import annotations

from pqflow.validation.density import density_table
from pqflow.validation.martingale import martingale_table
from pqflow.validation.moments import Moments
from pqflow.validation.reader import ScenarioSetReader
from pqflow.validation.summary import summarise, validate_run

__all__ = [
    "Moments",
    "ScenarioSetReader",
    "density_table",
    "martingale_table",
    "summarise",
    "validate_run",
]
