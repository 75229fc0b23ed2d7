"""Density-weight diagnostics on the written files.

For each density process ``Z_t`` stored in a set, ``E[Z_t] = 1`` at every ``t``: the full density
(``q_density`` = dQ/dP in the real-world set, ``p_density`` = dP/dQ in the market-consistent
set) and every density restricted to a block of drivers written beside it
(``q_density_<block>``, ``p_density_<block>``). Each table row is one (``column``, ``time``).

The mean is judged by the test its ``test`` column names (:mod:`pqflow.validation.mean_tests`:
the lognormal identity for a Gaussian density, the robust t for one carrying the CIR credit
part or a Heston index's part); the plain t is kept as ``z_score_plain_t``. ``lower_99`` and ``upper_99`` are the plain
99% interval ``mean +- z_{0.995} se`` for the reader.

The effective sample size ``ESS = (sum w)^2 / sum w^2`` (Kong, "A note on importance sampling
using standardized weights", University of Chicago, Dept. of Statistics, Technical Report 348,
1992; Kish's formula in survey sampling) and the largest single path's share of the total weight
show how far the weights have degenerated; a density's usable horizon is the first time its
ESS share falls below ``validation.ess_warning_share`` (:func:`usable_horizons`).
"""

from __future__ import annotations

from collections.abc import Generator, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from scipy.stats import norm

from pqflow.storage.names import density_block, density_column, density_columns
from pqflow.storage.scenario_set import ScenarioSet, SetPass
from pqflow.validation.mean_tests import DENSITY_DEVIATION, CellMoments, mean_test, rule_for_density
from pqflow.validation.run_files import run_steps

__all__ = ["density_table", "density_steps", "usable_horizons"]

def density_table(
    reader: ScenarioSet, *, credit_density: bool = False, heston_drivers: Sequence[str] = (),
    heston_unjudged: Mapping[str, str] | None = None,
) -> pd.DataFrame:
    """One row per (density column, output time): mean weight, its test, ESS and largest share.

    credit_density: whether the full density carries the CIR credit part; heston_drivers: the
    run's stochastic-volatility indices (their part is in the full density and in every block
    that holds their driver). Such densities are judged by the robust t
    (:func:`pqflow.validation.mean_tests.rule_for_density`); heston_unjudged: those of them beyond
    the range in which that rule's size is measured, with the reason
    (:func:`pqflow.validation.mean_tests.unmeasured_heston_drivers`): the densities holding them
    are not judged (inconclusive)."""
    scan = SetPass(scenario_set=reader)
    return run_steps({reader.measure: scan}, density_steps(scan, credit_density=credit_density,
                                                           heston_drivers=heston_drivers,
                                                           heston_unjudged=heston_unjudged))


def density_steps(
    scan: SetPass, *, credit_density: bool = False, heston_drivers: Sequence[str] = (),
    heston_unjudged: Mapping[str, str] | None = None,
) -> Generator[None, None, pd.DataFrame]:
    """:func:`density_table` as steps of a shared pass (:func:`pqflow.validation.run_files.run_steps`)."""
    reader = scan.scenario_set
    block_drivers = reader.density_blocks() if heston_drivers else {}
    columns = density_columns(reader.measure, reader.column_names())
    if not columns:
        raise ValueError(f"{reader.set_dir}: no {density_column(reader.measure)} column")
    antithetic = reader.antithetic
    acc: dict[str, CellMoments] = {}
    total: dict[str, np.ndarray] = {}
    total_sq: dict[str, np.ndarray] = {}
    largest: dict[str, np.ndarray] = {}
    counted = {"n_paths": 0}
    seen: list[np.ndarray] = []

    def feed(times: np.ndarray, cols: dict[str, np.ndarray]) -> None:
        for c in columns:
            w = cols[c]
            m = CellMoments.of(w, antithetic, acc[c].shift if c in acc else None)
            acc[c] = acc[c].merge(m) if c in acc else m
            s, s2, mx = w.sum(axis=0), (w * w).sum(axis=0), w.max(axis=0)
            total[c] = total[c] + s if c in total else s
            total_sq[c] = total_sq[c] + s2 if c in total_sq else s2
            largest[c] = np.maximum(largest[c], mx) if c in largest else mx
        counted["n_paths"] += next(iter(cols.values())).shape[0]
        seen[:] = [times]

    scan.add(columns, feed)
    yield
    assert seen
    times, n_paths = seen[0], counted["n_paths"]
    frames = []
    z99 = norm.ppf(0.995)
    for c in columns:
        block = density_block(c)
        rule = rule_for_density(c, credit_density=credit_density, heston_drivers=heston_drivers,
                                block_drivers=None if block is None else block_drivers.get(block))
        held = heston_drivers if block is None else block_drivers.get(block, heston_drivers)
        unjudged = [r for d, r in (heston_unjudged or {}).items() if d in held]
        res = mean_test(acc[c], 1.0, rule, deviation=DENSITY_DEVIATION, not_judged="; ".join(unjudged) or None)
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
