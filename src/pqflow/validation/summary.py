"""Verdicts: what the martingale and density tables mean for a run as a whole.

Cells of one set share their paths, and the running mean of one asset drifts slowly in time, so
neighbouring cells fail together: counting failures against a binomial would raise false
alarms. The verdict therefore controls the family-wise false-alarm rate: a set passes when every
cell lies within its Bonferroni-corrected interval, ``|z| <= Phi^{-1}(1 - alpha / (2 n))`` for
``n`` cells and ``alpha = 1%`` (Bonferroni's inequality holds whatever the correlation; common
practice in multiple testing). The share of cells outside their own 95% and 99% intervals is
reported beside what chance alone would give, for the reader's judgement.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import pandas as pd
from scipy.stats import norm

from pqflow.validation.assets import MartingaleAsset
from pqflow.validation.density import density_table
from pqflow.validation.martingale import martingale_table
from pqflow.validation.reader import ScenarioSetReader

__all__ = ["summarise", "validate_run", "cells_summary", "family_critical_z", "FAMILY_ALPHA"]

FAMILY_ALPHA = 0.01


def family_critical_z(n_cells: int, alpha: float = FAMILY_ALPHA) -> float:
    """Bonferroni-corrected two-sided critical value for ``n_cells`` tests at family level alpha."""
    return float(norm.ppf(1.0 - alpha / (2.0 * max(n_cells, 1))))


def cells_summary(table: pd.DataFrame, label_cols: list[str]) -> dict[str, Any]:
    """Cell counts, worst cell and family-wise verdict of a table with a ``z_score`` column."""
    n = int(len(table))
    z = table["z_score"].abs()
    crit = family_critical_z(n)
    worst = table.loc[z.idxmax()] if n else None
    out: dict[str, Any] = {
        "cells": n,
        "outside_95": int((z > norm.ppf(0.975)).sum()),
        "expected_outside_95_by_chance": 0.05 * n,
        "outside_99": int((z > norm.ppf(0.995)).sum()),
        "expected_outside_99_by_chance": 0.01 * n,
        "max_abs_z": float(z.max()) if n else 0.0,
        "worst_cell": {c: (worst[c].item() if hasattr(worst[c], "item") else worst[c]) for c in label_cols} if n else None,
        "family_level": 1.0 - FAMILY_ALPHA,
        "family_critical_z": crit,
        "verdict": "pass" if n == 0 or float(z.max()) <= crit else "fail",
    }
    return out


_cells_summary = cells_summary  # the earlier private name


def summarise(
    martingale: dict[str, pd.DataFrame], density: dict[str, pd.DataFrame], *, ess_warning_share: float
) -> dict[str, Any]:
    """Machine-readable verdicts per check and overall."""
    checks: dict[str, Any] = {}
    for measure, table in martingale.items():
        checks[f"martingale_{measure}"] = cells_summary(table, ["asset", "time", "ratio", "z_score"])
    for measure, table in density.items():
        body = table[table["time"] > 0].reset_index(drop=True)
        entry = cells_summary(body, ["time", "mean_weight", "z_score"])
        low = body[body["ess_share"] < ess_warning_share]
        entry["min_ess_share"] = float(body["ess_share"].min()) if len(body) else 1.0
        entry["max_weight_share"] = float(body["max_weight_share"].max()) if len(body) else 0.0
        entry["ess_warning_share"] = ess_warning_share
        entry["ess_below_warning_from_time"] = float(low["time"].iloc[0]) if len(low) else None
        if len(body):
            last = body.iloc[-1]
            entry["at_horizon"] = {
                "time": float(last["time"]),
                "mean_weight": float(last["mean_weight"]),
                "std_error": float(last["std_error"]),
                "ess_share": float(last["ess_share"]),
                "max_weight_share": float(last["max_weight_share"]),
            }
        entry["warnings"] = (
            [
                f"{measure}: effective sample size of the density weights falls below "
                f"{ess_warning_share:.0%} of the paths from t = {low['time'].iloc[0]:g} years"
            ]
            if len(low)
            else []
        )
        checks[f"density_{measure}"] = entry
    verdict = "pass" if all(c["verdict"] == "pass" for c in checks.values()) else "fail"
    return {
        "verdict": verdict,
        "rule": (
            "a check passes when every cell lies within its Bonferroni-corrected interval at "
            f"family level {1 - FAMILY_ALPHA:.0%}"
        ),
        "checks": checks,
    }


def validate_run(
    run_dir: str | Path,
    discount,
    *,
    ess_warning_share: float,
    extra_assets: Callable[[list[str]], Sequence[MartingaleAsset]] | None = None,
) -> tuple[dict[str, pd.DataFrame], dict[str, pd.DataFrame], dict[str, Any]]:
    """Compute every table and the summary for a run directory (nothing is written here).

    extra_assets: from a set's column names, the further assets of its martingale test (e.g.
    ``functools.partial(pqflow.validation.assets.martingale_assets, inputs)``); the same
    references serve both sets, the real-world deflator carrying the density.
    """
    run_dir = Path(run_dir)
    mart, dens = {}, {}
    for measure in ("market_consistent", "real_world"):
        reader = ScenarioSetReader(run_dir=run_dir, measure=measure)
        extra = extra_assets(reader.column_names()) if extra_assets is not None else ()
        mart[measure] = martingale_table(reader, discount, extra)
        dens[measure] = density_table(reader)
    summary = summarise(mart, dens, ess_warning_share=ess_warning_share)
    return mart, dens, summary
