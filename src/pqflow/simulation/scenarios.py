"""One batch of a scenario set: the Gaussian economy from the engine, and credit beside it.

The Gaussian parts (rates, indices, inflation) are simulated exactly by
:func:`pqflow.simulation.engine.simulate_batch` from the batch's stream. Credit intensities
(CIR++, :mod:`pqflow.models.cir_credit`) are independent of those drivers in this version and
are simulated from their own stream (:func:`pqflow.simulation.streams.credit_generator`) with
full-truncation Euler on whole substeps per output step; their defaultable bonds use the
batch's simulated risk-free bonds. The density of the whole set is the product of the two
parts' densities (independent drivers), and the real-world deflator is that density over the
cash account.
"""

from __future__ import annotations

import math

import numpy as np

from pqflow.models.base import ScenarioModel
from pqflow.models.cir_credit import CirCreditModel, simulate_credit
from pqflow.models.hull_white_equity import bond_column
from pqflow.simulation.engine import DENSITY_COLUMN, Workspace, simulate_batch
from pqflow.simulation.streams import batch_generator, credit_generator

__all__ = ["credit_substeps", "simulate_part"]


def credit_substeps(times: np.ndarray, substeps_per_year: int) -> int:
    """Whole Euler substeps per output step so that each substep is at most
    ``1 / substeps_per_year`` years (the grid's longest step decides)."""
    longest = float(np.max(np.diff(times))) if times.size > 1 else 1.0
    return max(1, math.ceil(substeps_per_year * longest - 1e-9))


def simulate_part(
    model: ScenarioModel,
    times: np.ndarray,
    *,
    measure: str,
    n_paths: int,
    seed: int,
    batch: int,
    antithetic: bool,
    credit: CirCreditModel | None = None,
    credit_substeps_per_year: int = 12,
    workspace: Workspace | None = None,
) -> dict[str, np.ndarray]:
    """Every column of batch ``batch`` of ``measure`` (``(n_paths, n_times)`` each)."""
    cols = simulate_batch(
        model, times, measure=measure, n_paths=n_paths, rng=batch_generator(seed, measure, batch),
        antithetic=antithetic, workspace=workspace,
    )
    if credit is None:
        return cols
    missing = [m for m in credit.bond_maturities if bond_column(m) not in cols]
    if missing:
        raise ValueError(f"credit bonds need the risk-free bonds {missing} among the output columns")
    paths = simulate_credit(
        credit, times, credit_generator(seed, measure, batch), measure=measure, n_paths=n_paths,
        substeps=credit_substeps(np.asarray(times, dtype=float), credit_substeps_per_year),
        risk_free={m: cols[bond_column(m)] for m in credit.bond_maturities},
    )
    cols.update(paths.columns)
    density = DENSITY_COLUMN[measure]
    cols[density] = cols[density] * paths.density
    if measure == "real_world":
        cols["deflator"] = cols[density] / cols["cash_account"]
    return cols
