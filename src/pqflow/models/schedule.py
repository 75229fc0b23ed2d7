"""Deterministic functions of time that are constant between knots.

Piecewise-constant volatilities and market prices of risk keep every transition Gaussian with
closed-form moments: over a step the model integrates each kernel over the pieces the step
covers.
"""

from __future__ import annotations

from bisect import bisect_right
from dataclasses import dataclass

import numpy as np

__all__ = ["PiecewiseConstant", "as_schedule", "segments"]


@dataclass(frozen=True, kw_only=True)
class PiecewiseConstant:
    """``f(t) = values[i]`` for ``knots[i] <= t < knots[i+1]``; ``knots[0] = 0`` and the last value
    holds for ever. Shapes ``(n,)``."""

    knots: tuple[float, ...]
    values: tuple[float, ...]

    def __post_init__(self) -> None:
        k = tuple(float(x) for x in self.knots)
        v = tuple(float(x) for x in self.values)
        if not k or len(k) != len(v):
            raise ValueError("a schedule needs as many values as knots, at least one")
        if k[0] != 0.0 or any(b <= a for a, b in zip(k, k[1:], strict=False)):
            raise ValueError("schedule knots must start at 0 and increase strictly")
        if not all(np.isfinite(v)):
            raise ValueError("schedule values must be finite")
        object.__setattr__(self, "knots", k)
        object.__setattr__(self, "values", v)

    @classmethod
    def constant(cls, value: float) -> PiecewiseConstant:
        return cls(knots=(0.0,), values=(float(value),))

    @property
    def is_constant(self) -> bool:
        return len(self.values) == 1

    def __call__(self, t: np.ndarray | float) -> np.ndarray:
        idx = np.searchsorted(np.asarray(self.knots), np.asarray(t, dtype=float), side="right") - 1
        return np.asarray(self.values)[np.clip(idx, 0, len(self.values) - 1)]

    def value_at(self, t: float) -> float:
        """The value at one time ``t``: the same as ``float(self(t))`` without numpy's per-call
        cost (``segments`` asks it once per piece, hundreds of times for a monthly schedule)."""
        return self.values[min(max(bisect_right(self.knots, t) - 1, 0), len(self.values) - 1)]

    def to_json(self) -> dict[str, list[float]]:
        return {"knots": list(self.knots), "values": list(self.values)}

    @classmethod
    def from_json(cls, data: dict[str, list[float]] | float) -> PiecewiseConstant:
        if isinstance(data, (int, float)):
            return cls.constant(float(data))
        return cls(knots=tuple(data["knots"]), values=tuple(data["values"]))


def as_schedule(value: float | PiecewiseConstant) -> PiecewiseConstant:
    return value if isinstance(value, PiecewiseConstant) else PiecewiseConstant.constant(float(value))


def segments(t0: float, t1: float, *schedules: PiecewiseConstant) -> list[tuple[float, float, tuple[float, ...]]]:
    """Split ``[t0, t1]`` at every knot of ``schedules``: ``[(u0, u1, (value of each schedule))]``."""
    cuts = {t0, t1}
    for s in schedules:
        cuts.update(k for k in s.knots if t0 < k < t1)
    edges = sorted(cuts)
    out = []
    for u0, u1 in zip(edges, edges[1:], strict=False):
        mid = 0.5 * (u0 + u1)
        out.append((u0, u1, tuple(s.value_at(mid) for s in schedules)))
    return out
