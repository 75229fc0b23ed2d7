"""The simulation engine: time grid, random streams (one seed tree) and batches."""

from __future__ import annotations

from pqflow.simulation.engine import MEASURES, Workspace, simulate_batch, simulate_states, time_grid
from pqflow.simulation.plan import Batch, plan_batches
from pqflow.simulation.streams import batch_generator, batch_seed_sequence

__all__ = [
    "MEASURES",
    "Batch",
    "Workspace",
    "batch_generator",
    "batch_seed_sequence",
    "plan_batches",
    "simulate_batch",
    "simulate_states",
    "time_grid",
]
