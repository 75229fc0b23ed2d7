"""Density-weight diagnostics on the written files.

For each density process ``Z_t`` stored in a set, ``E[Z_t] = 1`` at every ``t``: the full density
(``q_density`` = dQ/dP in the real-world set, ``p_density`` = dP/dQ in the market-consistent
set) and every density restricted to a block of drivers written beside it
(``q_density_<block>``, ``p_density_<block>``). Each table row is one (``column``, ``time``).

The mean is judged by the test its ``test`` column names (:mod:`pqflow.validation.mean_tests`:
the lognormal identity for a Gaussian density, the robust t for one carrying the CIR credit
part); the plain t is kept as ``z_score_plain_t``. ``lower_99`` and ``upper_99`` are the plain
99% interval ``mean +- z_{0.995} se`` for the reader.

The effective sample size ``ESS = (sum w)^2 / sum w^2`` (Kong, "A note on importance sampling
using standardized weights", University of Chicago, Dept. of Statistics, Technical Report 348,
1992; Kish's formula in survey sampling) and the largest single path's share of the total weight
show how far the weights have degenerated; a density's usable horizon is the first time its
ESS share falls below ``validation.ess_warning_share`` (:func:`usable_horizons`).
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
import pandas as pd
from scipy.stats import norm

from pqflow.errors import RunDirectoryError
from pqflow.validation.mean_tests import DENSITY_DEVIATION, CellMoments, mean_test, rule_for_density
from pqflow.validation.reader import ScenarioSetReader

__all__ = ["density_table", "density_columns", "density_block", "usable_horizons", "DENSITY_COLUMNS"]

DENSITY_COLUMNS = {"real_world": "q_density", "market_consistent": "p_density"}


def density_columns(measure: str, names: list[str]) -> list[str]:
    """The density columns of a set, full density first: ``^q_density(_.+)?$`` in the
    real-world set, ``^p_density(_.+)?$`` in the market-consistent set."""
    base = DENSITY_COLUMNS[measure]
    pattern = re.compile(rf"^{base}(_.+)?$")
    found = [c for c in names if pattern.match(c)]
    return sorted(found, key=lambda c: (c != base, c))


def density_block(column: str) -> str | None:
    """The block of a density column (the suffix after ``q_density_`` / ``p_density_``), or
    ``None`` for the full density."""
    for base in DENSITY_COLUMNS.values():
        if column == base:
            return None
        if column.startswith(base + "_"):
            return column[len(base) + 1:]
    raise ValueError(f"{column!r} is not a density column")


def density_table(reader: ScenarioSetReader, *, credit_density: bool = False) -> pd.DataFrame:
    """One row per (density column, output time): mean weight, its test, ESS and largest share.

    credit_density: whether the full density carries the CIR credit part (then it is judged by
    the robust t)."""
    columns = density_columns(reader.measure, reader.column_names())
    if not columns:
        raise ValueError(f"{reader.set_dir}: no {DENSITY_COLUMNS[reader.measure]} column")
    antithetic = reader.antithetic
    acc: dict[str, CellMoments] = {}
    total: dict[str, np.ndarray] = {}
    total_sq: dict[str, np.ndarray] = {}
    largest: dict[str, np.ndarray] = {}
    n_paths = 0
    times = None
    for batch_times, cols in reader.iter_arrays(columns):
        times = batch_times
        for c in columns:
            w = cols[c]
            m = CellMoments.of(w, antithetic, acc[c].shift if c in acc else None)
            acc[c] = acc[c].merge(m) if c in acc else m
            s, s2, mx = w.sum(axis=0), (w * w).sum(axis=0), w.max(axis=0)
            total[c] = total[c] + s if c in total else s
            total_sq[c] = total_sq[c] + s2 if c in total_sq else s2
            largest[c] = np.maximum(largest[c], mx) if c in largest else mx
        n_paths += next(iter(cols.values())).shape[0]
    if times is None:
        raise RunDirectoryError(f"{reader.set_dir}: the scenario set has no parts to read")
    frames = []
    z99 = norm.ppf(0.995)
    for c in columns:
        rule = rule_for_density(c, credit_density=credit_density)
        res = mean_test(acc[c], 1.0, rule, deviation=DENSITY_DEVIATION)
        ess = total[c] ** 2 / total_sq[c]  # Kong (1992)
        frames.append(pd.DataFrame({
            "column": c,
            "time": times,
            "mean_weight": res.estimate,
            "std_error": res.std_error,
            "test": res.test,
            "z_score": res.z_score,
            "z_score_plain_t": res.z_plain,
            "statistic_se": res.statistic_se,
            "material_effect": res.material_effect,
            "lower_99": res.estimate - z99 * res.std_error,
            "upper_99": res.estimate + z99 * res.std_error,
            "pass_99": np.abs(res.z_score) <= z99,
            "ess": ess,
            "ess_share": ess / n_paths,
            "max_weight_share": largest[c] / total[c],
        }))
    return pd.concat(frames, ignore_index=True)


def usable_horizons(measure: str, table: pd.DataFrame, ess_warning_share: float) -> list[dict[str, Any]]:
    """Per density column of a :func:`density_table`: its usable horizon (the first time ``> 0``
    its ESS share falls below ``ess_warning_share``; ``None`` if never) and its ESS share and
    largest weight share at the set's last output time."""
    out = []
    for column, rows in table.groupby("column", sort=False):
        body = rows[rows["time"] > 0]
        low = body[body["ess_share"] < ess_warning_share]
        last = rows.iloc[-1]
        out.append({
            "measure": measure,
            "column": column,
            "block": density_block(str(column)),
            "usable_horizon": float(low["time"].iloc[0]) if len(low) else None,
            "ess_share_at_horizon": float(last["ess_share"]),
            "max_weight_share_at_horizon": float(last["max_weight_share"]),
        })
    return out
