"""The interface every scenario model implements: an exact linear-Gaussian transition.

A model's state ``s`` (``d`` factors) moves over a step ``[t0, t1]`` as

    s_1 = F s_0 + c + e,    e ~ N(0, L L^T) under the market-consistent measure Q,
                            e ~ N(m, L L^T) under the real-world measure P,

where ``m`` is the shift of the mean that the market prices of risk cause (Girsanov: the same
covariance, another drift). Because the law of each step is exact, any step length is free of
discretisation bias, and the ratio of the two Gaussian transition densities is the exact density
of one measure against the other on the simulated grid (see ``pqflow.measure.density``).

A model also maps a path of states to its output columns (short rate, cash account, bond
prices, indices). The simulation engine owns the time grid, the random numbers and batching; the
measure code owns densities and deflators; storage owns the bytes. A new model is one class that
satisfies ``ScenarioModel`` plus its tests.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol, runtime_checkable

import numpy as np

__all__ = ["StepLaw", "StepLaws", "ScenarioModel"]


@dataclass(frozen=True, kw_only=True)
class StepLaw:
    """Exact law of one step (shapes: ``(d, d)`` matrices, ``(d,)`` vectors).

    transition: ``F``; drift: ``c`` (the deterministic part under Q);
    chol: lower-triangular ``L`` with ``L L^T`` the covariance of ``e`` under both measures;
    real_world_shift: ``m``, mean of ``e`` under P minus its mean under Q.
    """

    transition: np.ndarray
    drift: np.ndarray
    chol: np.ndarray
    real_world_shift: np.ndarray


@dataclass(frozen=True, kw_only=True)
class StepLaws:
    """The laws of ``K`` consecutive steps stacked: ``(K, d, d)`` matrices, ``(K, d)`` vectors.
    A model may offer ``step_laws(times) -> StepLaws`` to compute a whole grid at once; the
    engine then uses it instead of calling ``step_law`` step by step."""

    transition: np.ndarray
    drift: np.ndarray
    chol: np.ndarray
    real_world_shift: np.ndarray

    def law(self, k: int) -> StepLaw:
        return StepLaw(transition=self.transition[k], drift=self.drift[k], chol=self.chol[k],
                       real_world_shift=self.real_world_shift[k])


@runtime_checkable
class ScenarioModel(Protocol):
    """Dynamics plus closed forms; no random numbers, no I/O."""

    @property
    def state_names(self) -> tuple[str, ...]:
        """Names of the ``d`` state variables, in order."""
        ...

    def initial_state(self) -> np.ndarray:
        """State at time 0, shape ``(d,)``."""
        ...

    def step_law(self, t0: float, t1: float) -> StepLaw:
        """Exact law of the step from ``t0`` to ``t1``."""
        ...

    def columns(self, times: np.ndarray, states: np.ndarray) -> dict[str, np.ndarray]:
        """Output columns from states ``(n_paths, n_times, d)`` at ``times`` ``(n_times,)``:
        each value has shape ``(n_paths, n_times)``; must include ``cash_account``."""
        ...

    def column_units(self) -> dict[str, str]:
        """Unit of each output column, for the files' metadata."""
        ...
