"""Calibration: from the configuration (and, later, market data) to one parameter set that
feeds both scenario sets."""

from __future__ import annotations

from pqflow.calibration.assemble import (
    Calibration,
    assemble_calibration,
    build_model,
    load_calibration,
)
from pqflow.calibration.part_kinds import SHIPPED_KINDS as _SHIPPED_KINDS  # noqa: F401  (registers the shipped kinds)

__all__ = ["Calibration", "assemble_calibration", "build_model", "load_calibration"]
