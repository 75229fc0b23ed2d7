"""Verdicts: what the martingale and density tables mean for a run as a whole.

Cells share paths, so they are not independent; as a practical rule (common practice, stated
here so a reader can judge it) a set passes when the number of cells outside their interval is
no more than the 99.9th percentile of the Binomial(n_cells, alpha) count that chance alone gives.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pandas as pd
from scipy.stats import binom

from pqflow.validation.density import density_table
from pqflow.validation.martingale import LEVELS, martingale_table
from pqflow.validation.reader import ScenarioSetReader

__all__ = ["summarise", "validate_run", "chance_limit"]

_CHANCE_QUANTILE = 0.999


def chance_limit(n_cells: int, alpha: float) -> int:
    """Largest failure count still consistent with chance (99.9th percentile of the binomial)."""
    return int(binom.ppf(_CHANCE_QUANTILE, n_cells, alpha))


def _failure_summary(passes: pd.Series, alpha: float) -> dict[str, Any]:
    n = int(passes.size)
    failed = int((~passes).sum())
    limit = chance_limit(n, alpha)
    return {
        "cells": n,
        "failed": failed,
        "failed_share": failed / n if n else 0.0,
        "expected_by_chance": alpha * n,
        "chance_limit": limit,
        "verdict": "pass" if failed <= limit else "fail",
    }


def summarise(
    martingale: dict[str, pd.DataFrame], density: dict[str, pd.DataFrame], *, ess_warning_share: float
) -> dict[str, Any]:
    """Machine-readable verdicts per check and overall."""
    checks: dict[str, Any] = {}
    for measure, table in martingale.items():
        entry = {f"level_{int(round(lv * 100))}": _failure_summary(table[f"pass_{int(round(lv * 100))}"], 1 - lv) for lv in LEVELS}
        entry["verdict"] = "pass" if all(v["verdict"] == "pass" for v in entry.values()) else "fail"
        checks[f"martingale_{measure}"] = entry
    for measure, table in density.items():
        body = table[table["time"] > 0]
        entry = _failure_summary(body["pass_99"], 0.01)
        low = body[body["ess_share"] < ess_warning_share]
        entry["min_ess_share"] = float(body["ess_share"].min()) if len(body) else 1.0
        entry["max_weight_share"] = float(body["max_weight_share"].max()) if len(body) else 0.0
        entry["ess_warning_share"] = ess_warning_share
        entry["ess_below_warning_from_time"] = float(low["time"].iloc[0]) if len(low) else None
        entry["warnings"] = (
            [
                f"effective sample size falls below {ess_warning_share:.0%} of the paths from "
                f"t = {low['time'].iloc[0]:g} years"
            ]
            if len(low)
            else []
        )
        checks[f"density_{measure}"] = entry
    verdict = "pass" if all(c["verdict"] == "pass" for c in checks.values()) else "fail"
    return {"verdict": verdict, "checks": checks}


def validate_run(
    run_dir: str | Path, discount, *, ess_warning_share: float
) -> tuple[dict[str, pd.DataFrame], dict[str, pd.DataFrame], dict[str, Any]]:
    """Compute every table and the summary for a run directory (nothing is written here)."""
    run_dir = Path(run_dir)
    mart, dens = {}, {}
    for measure in ("market_consistent", "real_world"):
        reader = ScenarioSetReader(run_dir=run_dir, measure=measure)
        mart[measure] = martingale_table(reader, discount)
        dens[measure] = density_table(reader)
    summary = summarise(mart, dens, ess_warning_share=ess_warning_share)
    return mart, dens, summary
