"""Density-weight diagnostics on the written files.

For the density process ``Z_t`` stored in a set (``q_density`` = dQ/dP in the real-world set,
``p_density`` = dP/dQ in the market-consistent set), ``E[Z_t] = 1`` at every ``t``. The
effective sample size ``ESS = (sum w)^2 / sum w^2`` (Kish's formula) and the largest single
path's share of the total weight show how far the weights have degenerated. Each time's mean
weight comes with its 99% interval ``mean +- z_{0.995} se`` (``lower_99``, ``upper_99``). The
score judged is Johnson's skewness-corrected t (:mod:`pqflow.validation.moments`): weights are
strongly skewed to the right, and the plain t (kept as ``z_score_plain_t``) raises false alarms
below 1 once the effective sample size falls.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.stats import norm

from pqflow.validation.moments import Moments, sampling_units
from pqflow.validation.reader import ScenarioSetReader

__all__ = ["density_table", "DENSITY_COLUMNS"]

DENSITY_COLUMNS = {"real_world": "q_density", "market_consistent": "p_density"}


def density_table(reader: ScenarioSetReader) -> pd.DataFrame:
    """One row per output time: mean weight, its standard error, ESS and largest share."""
    column = DENSITY_COLUMNS[reader.measure]
    antithetic = reader.antithetic
    acc: Moments | None = None
    total = total_sq = largest = None
    n_paths = 0
    times = None
    for times, cols in reader.iter_arrays([column]):
        w = cols[column]
        m = Moments.of(sampling_units(w, antithetic))
        acc = m if acc is None else acc.merge(m)
        s, s2, mx = w.sum(axis=0), (w**2).sum(axis=0), w.max(axis=0)
        total = s if total is None else total + s
        total_sq = s2 if total_sq is None else total_sq + s2
        largest = mx if largest is None else np.maximum(largest, mx)
        n_paths += w.shape[0]
    assert acc is not None and times is not None
    se = acc.std_error
    z = acc.z_score(1.0)  # Johnson's skewness-corrected t (validation.moments)
    z_plain = np.where(se > 0, (acc.mean - 1.0) / np.where(se > 0, se, 1.0), 0.0)
    ess = total**2 / total_sq
    return pd.DataFrame(
        {
            "time": times,
            "mean_weight": acc.mean,
            "std_error": se,
            "z_score": z,
            "z_score_plain_t": z_plain,
            "lower_99": acc.mean - norm.ppf(0.995) * se,
            "upper_99": acc.mean + norm.ppf(0.995) * se,
            "pass_99": np.abs(z) <= norm.ppf(0.995),
            "ess": ess,
            "ess_share": ess / n_paths,
            "max_weight_share": largest / total,
        }
    )
