"""One batch of a scenario set: the Gaussian economy from the engine, and credit beside it.

Heston indices (stochastic variance) are simulated conditionally on the Gaussian economy from
their own stream, in :mod:`pqflow.simulation.heston_part`: the place of a non-Gaussian part.

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
from collections.abc import Sequence

import numpy as np

from pqflow.measure.blocks import DensityBlock, ObservedRows, block_states, model_structure
from pqflow.measure.density import deflator
from pqflow.models.base import ScenarioModel
from pqflow.models.cir_credit import CirCreditModel
from pqflow.models.heston import HestonIndex
from pqflow.simulation.credit import simulate_credit
from pqflow.simulation.engine import Workspace, simulate_batch
from pqflow.simulation.heston_part import projection_noise_rows, simulate_heston_index
from pqflow.simulation.streams import batch_generator, credit_generator, heston_generator
from pqflow.storage.names import DENSITY_COLUMN, bond_column, density_block_column, variance_column

__all__ = ["credit_substeps", "simulate_part", "block_layout", "heston_block_rows"]


def credit_substeps(times: np.ndarray, substeps_per_year: int) -> int:
    """Whole Euler substeps per output step so that each substep is at most
    ``1 / substeps_per_year`` years (the grid's longest step decides)."""
    longest = float(np.max(np.diff(times))) if times.size > 1 else 1.0
    return max(1, math.ceil(substeps_per_year * longest - 1e-9))


def block_layout(
    model: ScenarioModel, credit: CirCreditModel | None, blocks: Sequence[DensityBlock]
) -> dict[str, tuple[tuple[int, ...], tuple[int, ...]]]:
    """For each block: the indices of its Gaussian states in ``model`` and of its ratings in
    ``credit`` (``ValueError`` naming the state that ties a block to the outside)."""
    ratings = {r: f"credit_{r}" for r in (credit.names if credit is not None else ())}
    drivers = getattr(model, "state_drivers", None)
    if not callable(drivers):
        raise ValueError("density blocks need a model that names the drivers of its states")
    transition = model.step_laws(np.array([0.0, 1.0])).transition  # type: ignore[attr-defined]
    structure = model_structure(model.state_names, drivers(), transition, ratings)
    names = list(model.state_names)
    rating_names = list(ratings)
    out = {}
    for block in blocks:
        states = block_states(block, structure)
        out[block.name] = (
            tuple(names.index(s) for s in states if s in names),
            tuple(rating_names.index(s[len("intensity_"):]) for s in states if s not in names),
        )
    return out


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
    density_blocks: Sequence[DensityBlock] = (),
    heston: Sequence[HestonIndex] = (),
) -> dict[str, np.ndarray]:
    """Every column of batch ``batch`` of ``measure`` (``(n_paths, n_times)`` each), with the
    restricted density of each of ``density_blocks`` (``q_density_<block>`` /
    ``p_density_<block>``): its Gaussian states' density from the engine times its ratings'
    own densities (credit is independent of the Gaussian drivers). ``heston``: indices with
    Heston variance, simulated conditionally on the economy (:mod:`pqflow.simulation.heston_part`);
    each replaces its index column, adds ``variance_<name>`` and multiplies its density into the
    full density and into the density of each block that holds its driver (:func:`heston_block_rows`)."""
    layout = block_layout(model, credit, density_blocks) if density_blocks else {}
    by_name = {b.name: b for b in density_blocks}
    gaussian = {
        name: heston_block_rows(model, np.asarray(times, dtype=float), by_name[name], rows, heston)
        for name, (rows, _) in layout.items() if rows
    }
    cols = simulate_batch(
        model, times, measure=measure, n_paths=n_paths, rng=batch_generator(seed, measure, batch),
        antithetic=antithetic, workspace=workspace, density_blocks=gaussian,
    )
    for name, (rows, _) in layout.items():
        if not rows:
            cols[density_block_column(measure, name)] = np.ones_like(cols[DENSITY_COLUMN[measure]])
    density = DENSITY_COLUMN[measure]
    for position, spec in enumerate(heston):
        paths = simulate_heston_index(
            spec, model, np.asarray(times, dtype=float), cols, heston_generator(seed, measure, batch, position),
            measure=measure, n_paths=n_paths, antithetic=antithetic,
        )
        cols[spec.column] = spec.level * np.exp(paths.log_return)
        cols[variance_column(spec.name)] = paths.variance
        own = np.exp(paths.log_density)
        cols[density] = cols[density] * own
        for block in density_blocks:
            if spec.name in block.drivers:
                column = density_block_column(measure, block.name)
                cols[column] = cols[column] * own
    if heston:
        cols["deflator"] = deflator(measure, cols[density], cols["cash_account"])
    if credit is None:
        return cols
    missing = [m for m in credit.bond_maturities if bond_column(m) not in cols]
    if missing:
        raise ValueError(f"credit bonds need the risk-free bonds {missing} among the output columns")
    credit_paths = simulate_credit(
        credit, times, credit_generator(seed, measure, batch), measure=measure, n_paths=n_paths,
        substeps=credit_substeps(np.asarray(times, dtype=float), credit_substeps_per_year),
        risk_free={m: cols[bond_column(m)] for m in credit.bond_maturities},
    )
    cols.update(credit_paths.columns)
    for name, (_, ratings) in layout.items():
        if ratings:
            if credit_paths.rating_density is None:
                raise RuntimeError("simulate_credit gives each rating's own density; none came back")
            column = density_block_column(measure, name)
            cols[column] = cols[column] * np.prod(credit_paths.rating_density[list(ratings)], axis=0)
    cols[density] = cols[density] * credit_paths.density
    cols["deflator"] = deflator(measure, cols[density], cols["cash_account"])
    return cols


def heston_block_rows(
    model: ScenarioModel, times: np.ndarray, block: DensityBlock, rows: Sequence[int], heston: Sequence[HestonIndex]
) -> tuple[int, ...] | ObservedRows:
    """What the Gaussian factor of ``block``'s density sees. Without a Heston index in the block:
    its states ``rows``. With one: its states less the index's Gaussian stand-in (the Heston part
    writes the index), plus the increments of the index's projection on the economy's drivers,
    which the index reads (:func:`pqflow.simulation.heston_part.projection_noise_rows`); the
    Heston part's own density multiplies it after the simulation (:func:`simulate_part`)."""
    mine = [spec for spec in heston if spec.name in block.drivers]
    if not mine:
        return tuple(rows)
    names = {spec.name for spec in mine}
    drivers = model.state_drivers()  # type: ignore[attr-defined]
    kept = tuple(i for i in rows if not names & set(drivers[i]))
    extra = [projection_noise_rows(model, spec, times)[:, None, :] for spec in mine if spec.loadings]
    if not extra:
        return kept
    return ObservedRows(rows=kept, extra=np.concatenate(extra, axis=1))
