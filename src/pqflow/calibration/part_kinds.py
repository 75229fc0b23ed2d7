"""The part kinds shipped with pqflow, registered in one place: one line per kind.

:mod:`pqflow.calibration` imports this module, so every process that calibrates, simulates,
validates, reports or runs a step (the command line, the Prefect flow, a Dask process worker
unpickling a step of :mod:`pqflow.jobs`) has the kinds registered before it reads a
configuration's part or a ``calibration.json`` entry. A kind that fits lives at the calibration
layer (its fit may use the calibration's formulas); a kind without a fit may live in ``models/``.
A new kind is its file, its test and one ``register_part`` line here.
"""

from __future__ import annotations

from pqflow.calibration.index_kind import IndexKind
from pqflow.calibration.inflation_kind import InflationKind
from pqflow.models.parts import register_part

__all__ = ["SHIPPED_KINDS"]

#: the sections of the kinds registered here, in registration order
SHIPPED_KINDS: tuple[str, ...] = (
    register_part(IndexKind()).section,  # first: the indices lead the drivers beyond rates
    register_part(InflationKind()).section,
)
