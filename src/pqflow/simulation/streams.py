"""Random streams: one root seed, one independent child per (measure, batch).

The child for measure ``m`` and batch ``b`` is ``SeedSequence(root, spawn_key=(m, b))``, exactly
the grandchild ``SeedSequence(root).spawn(...)[m].spawn(...)[b]`` that numpy's spawning would
hand out, built directly so that no batch depends on how many others exist, on the number of
workers or on the order in which batches finish. Each non-Gaussian part of a batch draws from a
child of the batch's sequence: credit child ``0``, the ``i``-th Heston index child ``(1, i)``;
the engine (:func:`pqflow.simulation.engine.run_substeps`) makes every draw.
"""

from __future__ import annotations

import numpy as np

__all__ = ["MEASURE_STREAM", "batch_seed_sequence", "batch_generator", "credit_generator", "heston_generator"]

#: Fixed stream index of each measure in the seed tree (never renumber: it would change outputs).
MEASURE_STREAM = {"market_consistent": 0, "real_world": 1}


def batch_seed_sequence(root_seed: int, measure: str, batch: int) -> np.random.SeedSequence:
    """The seed sequence of one batch of one measure."""
    if measure not in MEASURE_STREAM:
        raise ValueError(f"unknown measure {measure!r}")
    if batch < 0:
        raise ValueError("batch index must not be negative")
    return np.random.SeedSequence(root_seed, spawn_key=(MEASURE_STREAM[measure], batch))


def batch_generator(root_seed: int, measure: str, batch: int) -> np.random.Generator:
    """A PCG64 generator for one batch of one measure."""
    return np.random.Generator(np.random.PCG64(batch_seed_sequence(root_seed, measure, batch)))


def credit_generator(root_seed: int, measure: str, batch: int) -> np.random.Generator:
    """A PCG64 generator for the credit intensities of one batch of one measure: the first
    child of that batch's seed sequence (``spawn_key = (measure_stream, batch, 0)``), so the
    Gaussian drivers' numbers are the same with or without credit."""
    parent = batch_seed_sequence(root_seed, measure, batch)
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(root_seed, spawn_key=(*parent.spawn_key, 0))))


def heston_generator(root_seed: int, measure: str, batch: int, position: int) -> np.random.Generator:
    """The stream of the ``position``-th Heston index of one batch: child ``(1, position)`` of the
    batch's seed sequence (credit uses child 0)."""
    parent = batch_seed_sequence(root_seed, measure, batch)
    seq = np.random.SeedSequence(root_seed, spawn_key=(*parent.spawn_key, 1, position))
    return np.random.Generator(np.random.PCG64(seq))
