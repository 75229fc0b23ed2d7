"""Running means, variances and third moments merged part by part, so a check over a large set
needs one part in memory at a time (Chan, Golub and LeVeque's pairwise update for the second
moment; Pebay, "Formulas for robust, one-pass parallel computation of covariances and
arbitrary-order statistical moments", Sandia report SAND2008-6212, for the third).

:meth:`Moments.z_score` is Johnson's modified t (N. J. Johnson, "Modified t tests and
confidence intervals for asymmetrical populations", *JASA* 73 (1978) 536-544; formula from
memory). It no longer judges any check: it is quadratic in the deviation, so with large
skewness its low side can never reach the critical value (a 20% low density mean at
var(log w) = 4.9 went undetected); the checks use :mod:`pqflow.validation.mean_tests`. It is
kept for comparison in the tests:

    t_J = [ (xbar - mu0) + mu3 / (6 s^2 n) + mu3 (xbar - mu0)^2 / (3 s^4) ] / (s / sqrt(n)),

with ``mu3`` the sample third central moment. Density weights and deflated prices are skewed
to the right (lognormal-like); there the plain t statistic is skewed to the left, because a
sample that happens to miss the rare large values has both a low mean and a low standard
error, and it raises false alarms below the mean. Johnson's term removes the first-order
(Edgeworth) effect of the skewness.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Moments", "sampling_units", "spread_from_other_measure"]

_RELATIVE_FLOOR = 1e-12  # below this relative standard error the skewness term is not used


@dataclass(frozen=True, kw_only=True)
class Moments:
    """Count, mean and sums of squared and cubed deviations per column: shapes ``()``,
    ``(k,)``, ``(k,)``, ``(k,)``."""

    count: int
    mean: np.ndarray
    m2: np.ndarray
    m3: np.ndarray

    @classmethod
    def of(cls, values: np.ndarray) -> Moments:
        """From samples ``(n, k)``."""
        mean = values.mean(axis=0)
        dev = values - mean
        sq = dev * dev
        return cls(count=values.shape[0], mean=mean, m2=sq.sum(axis=0), m3=(sq * dev).sum(axis=0))

    def merge(self, other: Moments | None) -> Moments:
        if other is None or other.count == 0:
            return self
        na, nb = self.count, other.count
        n = na + nb
        delta = other.mean - self.mean
        mean = self.mean + delta * (nb / n)
        m2 = self.m2 + other.m2 + delta**2 * (na * nb / n)
        m3 = (
            self.m3 + other.m3
            + delta**3 * (na * nb * (na - nb) / n**2)
            + 3.0 * delta * (na * other.m2 - nb * self.m2) / n
        )
        return Moments(count=n, mean=mean, m2=m2, m3=m3)

    @property
    def std_error(self) -> np.ndarray:
        """Standard error of the mean (sample variance with ``n - 1``)."""
        if self.count < 2:
            return np.full_like(self.mean, np.nan)
        return np.sqrt(self.m2 / (self.count - 1) / self.count)

    def z_score(self, reference: np.ndarray | float) -> np.ndarray:
        """Johnson's skewness-corrected t of ``mean - reference`` (module docstring); 0 where the
        standard error is 0, the plain t where it is negligible against the mean (a quantity
        exact by construction, e.g. linear in antithetic normals, has no skewness to correct)."""
        n = self.count
        ref = np.asarray(reference, dtype=float)
        diff = self.mean - ref
        se = self.std_error
        if n < 3:
            return np.where(se > 0, diff / np.where(se > 0, se, 1.0), 0.0)
        s2 = self.m2 / (n - 1)
        mu3 = self.m3 / n
        usable = se > _RELATIVE_FLOOR * np.maximum(np.abs(self.mean), np.abs(ref))
        safe_s2 = np.where(usable, s2, 1.0)
        corrected = diff + mu3 / (6.0 * safe_s2 * n) + mu3 * diff**2 / (3.0 * safe_s2**2)
        numerator = np.where(usable, corrected, diff)
        return np.where(se > 0, numerator / np.where(se > 0, se, 1.0), 0.0)


def sampling_units(values: np.ndarray, antithetic: bool) -> np.ndarray:
    """Independent sampling units: antithetic pairs ``(2j, 2j+1)`` are averaged first, so the
    standard error is correct under antithetic sampling. ``values`` is ``(n_paths, k)``."""
    if not antithetic:
        return values
    if values.shape[0] % 2:
        raise ValueError("antithetic set with an odd number of paths in a part")
    return 0.5 * (values[0::2] + values[1::2])


def spread_from_other_measure(second_moment: np.ndarray | float, mean: np.ndarray | float,
                              paths: int) -> np.ndarray:
    """Standard error of a real-world importance-sampling mean ``mean_P(w Y)`` (``w = dQ/dP``,
    ``Y`` a deflated payoff) implied by moments measured in the market-consistent set:
    ``Var_P(w Y) = E_P[w^2 Y^2] - E_P[w Y]^2 = E_Q[w Y^2] - E_Q[Y]^2`` (Girsanov: ``E_P[w g] =
    E_Q[g]``), so ``second_moment`` is the market-consistent mean of ``Y^2 / p_density`` and
    ``mean`` that of ``Y``; ``paths``: real-world paths (antithetic pairs get no credit, which is
    conservative for the monotone payoffs judged here). The large weights sit where the payoff
    pays; the market-consistent set samples that region well, the real-world sample often does
    not, and then its own standard error is too small just when its mean is off."""
    var = np.maximum(np.asarray(second_moment, dtype=float) - np.asarray(mean, dtype=float) ** 2, 0.0)
    return np.sqrt(var) / np.sqrt(max(int(paths), 1))
