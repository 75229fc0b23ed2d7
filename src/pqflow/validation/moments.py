"""Running means and variances merged part by part (Chan, Golub and LeVeque's pairwise
update), so a check over a large set needs one part in memory at a time."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Moments", "sampling_units"]


@dataclass(frozen=True, kw_only=True)
class Moments:
    """Count, mean and sum of squared deviations per column: shapes ``()``, ``(k,)``, ``(k,)``."""

    count: int
    mean: np.ndarray
    m2: np.ndarray

    @classmethod
    def of(cls, values: np.ndarray) -> Moments:
        """From samples ``(n, k)``."""
        mean = values.mean(axis=0)
        return cls(count=values.shape[0], mean=mean, m2=((values - mean) ** 2).sum(axis=0))

    def merge(self, other: Moments | None) -> Moments:
        if other is None or other.count == 0:
            return self
        n = self.count + other.count
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.count / n)
        m2 = self.m2 + other.m2 + delta**2 * (self.count * other.count / n)
        return Moments(count=n, mean=mean, m2=m2)

    @property
    def std_error(self) -> np.ndarray:
        """Standard error of the mean (sample variance with ``n - 1``)."""
        if self.count < 2:
            return np.full_like(self.mean, np.nan)
        return np.sqrt(self.m2 / (self.count - 1) / self.count)


def sampling_units(values: np.ndarray, antithetic: bool) -> np.ndarray:
    """Independent sampling units: antithetic pairs ``(2j, 2j+1)`` are averaged first, so the
    standard error is correct under antithetic sampling. ``values`` is ``(n_paths, k)``."""
    if not antithetic:
        return values
    if values.shape[0] % 2:
        raise ValueError("antithetic set with an odd number of paths in a part")
    return 0.5 * (values[0::2] + values[1::2])
