"""Splitting a scenario set into batches."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Batch", "plan_batches"]


@dataclass(frozen=True, kw_only=True)
class Batch:
    """Batch ``index`` covers scenarios ``first .. first + size - 1``."""

    index: int
    first: int
    size: int


def plan_batches(n_scenarios: int, batch_size: int, *, antithetic: bool) -> tuple[Batch, ...]:
    """Consecutive batches of ``batch_size`` (the last may be smaller); antithetic pairs
    ``(2j, 2j+1)`` never straddle two batches."""
    if n_scenarios <= 0 or batch_size <= 0:
        raise ValueError("scenario count and batch size must be positive")
    if antithetic and (n_scenarios % 2 or batch_size % 2):
        raise ValueError("antithetic sampling needs an even scenario count and batch size")
    out = []
    for index, first in enumerate(range(0, n_scenarios, batch_size)):
        out.append(Batch(index=index, first=first, size=min(batch_size, n_scenarios - first)))
    return tuple(out)
