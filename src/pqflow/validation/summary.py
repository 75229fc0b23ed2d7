"""Verdicts: what the martingale and density tables mean for a run as a whole.

Cells of one set share their paths, and the running mean of one asset drifts slowly in time, so
neighbouring cells fail together: counting failures against a binomial would raise false
alarms. The verdict therefore controls the family-wise false-alarm rate: a set passes when every
cell lies within its Bonferroni-corrected interval, ``|z| <= Phi^{-1}(1 - alpha / (2 n))`` for
``n`` cells and ``alpha = 1%`` (Bonferroni's inequality holds whatever the correlation; common
practice in multiple testing). The share of cells outside their own 95% and 99% intervals is
reported beside what chance alone would give, for the reader's judgement.

Three verdicts. A cell *fails* when ``|z|`` exceeds the family critical value; it is
*inconclusive* when it does not fail but its test cannot detect a material deviation (5% of
today's price for a martingale cell, 10% for a density mean; columns ``material_effect`` and
``statistic_se``, :mod:`pqflow.validation.mean_tests`) with at least 50% power at the family
level, i.e. when ``material_effect / statistic_se < z_f``; otherwise it *passes*. A check fails
when any cell fails, else is inconclusive when any cell is, else passes; the run the same over
its checks. A table without those two columns has no power rule (its cells pass or fail).
"""

from __future__ import annotations

from collections.abc import Callable, Generator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.stats import norm

from pqflow.storage import validation_summary as vs
from pqflow.storage.scenario_set import ScenarioSet, SetPass
from pqflow.storage.validation_summary import check_counts_toward_verdict
from pqflow.validation.assets import MartingaleAsset
from pqflow.validation.density import density_steps, usable_horizons
from pqflow.validation.martingale import martingale_steps
from pqflow.validation.mean_tests import DENSITY_DEVIATION, MARTINGALE_DEVIATION
from pqflow.validation.run_files import all_steps, run_steps

__all__ = [
    "summarise", "validate_run", "validate_run_steps", "cells_summary", "family_critical_z", "FAMILY_ALPHA",
    "combine_verdicts", "VERDICT_RULE", "power_rule_text", "inconclusive_mask", "inconclusive_totals",
]

FAMILY_ALPHA = 0.01
_MEASURES = ("market_consistent", "real_world")
VERDICT_RULE = (
    "a cell fails when it lies outside its Bonferroni-corrected interval at family level 99%; it is "
    "inconclusive when it does not fail but its test could not detect a material deviation (5% of "
    "today's price for a deflated price, 10% for a density mean) with at least 50% power at that "
    "level; a check fails when any of its cells fails, else is inconclusive when any cell is, else "
    "passes; the run is judged the same way over the checks that count toward its verdict"
)


def power_rule_text(deviation: float) -> str:
    """The power rule in one plain sentence."""
    return (
        f"a cell is inconclusive when its test would detect a deviation of {deviation:.0%} of the expected "
        "value less than half the time at the family level (material effect / standard error below the "
        "family critical z)"
    )


def combine_verdicts(verdicts: list[str]) -> str:
    """``fail`` if any fails, else ``inconclusive`` if any is, else ``pass`` (``not_applicable``
    and other labels count as neither)."""
    if "fail" in verdicts:
        return "fail"
    if "inconclusive" in verdicts:
        return "inconclusive"
    return "pass"


def family_critical_z(n_cells: int, alpha: float = FAMILY_ALPHA) -> float:
    """Bonferroni-corrected two-sided critical value for ``n_cells`` tests at family level alpha."""
    return float(norm.ppf(1.0 - alpha / (2.0 * max(n_cells, 1))))


def inconclusive_mask(table: pd.DataFrame, crit: float) -> pd.Series:
    """Cells that do not fail but lack the power to detect their material effect (module
    docstring); all ``False`` for a table without ``material_effect`` and ``statistic_se``."""
    if not {"material_effect", "statistic_se"} <= set(table.columns) or not len(table):
        return pd.Series(False, index=table.index)
    se = table["statistic_se"].astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = table["material_effect"].astype(float) / se
    weak = ~(ratio >= crit)  # NaN ratio (no standard error) counts as weak
    return weak & (table["z_score"].abs() <= crit)


def cells_summary(table: pd.DataFrame, label_cols: list[str], *, deviation: float | None = None) -> dict[str, Any]:
    """Cell counts, worst cell and three-state verdict of a table with a ``z_score`` column
    (and, for the power rule, ``material_effect`` and ``statistic_se``; ``deviation`` is the
    material relative deviation those express)."""
    n = int(len(table))
    z = table["z_score"].abs()
    crit = family_critical_z(n)
    worst = table.loc[z.idxmax()] if n else None  # type: ignore[call-overload]  # pandas-stubs: .loc refuses idxmax's Hashable label
    weak = inconclusive_mask(table, crit)
    failed = n > 0 and float(z.max()) > crit
    from_time = None
    if weak.any() and "time" in table.columns:
        from_time = float(table.loc[weak, "time"].min())
    out: dict[str, Any] = {
        vs.CELLS: n,
        vs.OUTSIDE_95: int((z > norm.ppf(0.975)).sum()),
        vs.EXPECTED_OUTSIDE_95: 0.05 * n,
        vs.OUTSIDE_99: int((z > norm.ppf(0.995)).sum()),
        vs.EXPECTED_OUTSIDE_99: 0.01 * n,
        vs.MAX_ABS_Z: float(z.max()) if n else 0.0,
        vs.WORST_CELL: {c: (worst[c].item() if hasattr(worst[c], "item") else worst[c]) for c in label_cols}
        if worst is not None else None,
        vs.FAMILY_LEVEL: 1.0 - FAMILY_ALPHA,
        vs.FAMILY_CRITICAL_Z: crit,
        vs.VERDICT: "fail" if failed else ("inconclusive" if weak.any() else "pass"),
        vs.INCONCLUSIVE_CELLS: int(weak.sum()),
        vs.INCONCLUSIVE_FROM_TIME: from_time,
        vs.MATERIAL_DEVIATION: deviation,
        vs.POWER_RULE: power_rule_text(deviation) if deviation is not None else
        "no power rule: the cells pass or fail on their tolerance",
    }
    return out


_cells_summary = cells_summary  # the earlier private name


def summarise(
    martingale: dict[str, pd.DataFrame], density: dict[str, pd.DataFrame], *, ess_warning_share: float
) -> dict[str, Any]:
    """Machine-readable verdicts per check and overall, and the usable horizon of every density
    column (``densities``)."""
    checks: dict[str, Any] = {}
    densities: list[dict[str, Any]] = []
    for measure, table in martingale.items():
        checks[f"martingale_{measure}"] = cells_summary(
            table, ["asset", "time", "ratio", "z_score"], deviation=MARTINGALE_DEVIATION)
    for measure, table in density.items():
        body = table[table["time"] > 0].reset_index(drop=True)
        entry = cells_summary(body, ["column", "time", "mean_weight", "z_score"], deviation=DENSITY_DEVIATION)
        horizons = usable_horizons(measure, table, ess_warning_share)
        densities.extend(horizons)
        full = body[body["column"] == horizons[0]["column"]] if horizons else body
        low = full[full["ess_share"] < ess_warning_share]
        entry[vs.MIN_ESS_SHARE] = float(full["ess_share"].min()) if len(full) else 1.0
        entry[vs.MAX_WEIGHT_SHARE] = float(full["max_weight_share"].max()) if len(full) else 0.0
        entry[vs.ESS_WARNING_SHARE] = ess_warning_share
        entry[vs.ESS_BELOW_WARNING_FROM_TIME] = float(low["time"].iloc[0]) if len(low) else None
        if len(full):
            last = full.iloc[-1]
            entry[vs.AT_HORIZON] = {
                "time": float(last["time"]),
                "mean_weight": float(last["mean_weight"]),
                "std_error": float(last["std_error"]),
                "ess_share": float(last["ess_share"]),
                "max_weight_share": float(last["max_weight_share"]),
            }
        entry[vs.WARNINGS] = [
            f"{measure}: effective sample size of {h['column']} falls below {ess_warning_share:.0%} of the "
            f"paths from t = {h['usable_horizon']:g} years (its usable horizon)"
            for h in horizons if h["usable_horizon"] is not None
        ]
        checks[f"density_{measure}"] = entry
    summary = {
        vs.VERDICT: combine_verdicts([c[vs.VERDICT] for c in checks.values()]),
        vs.RULE: VERDICT_RULE,
        vs.CHECKS: checks,
        vs.DENSITIES: densities,
    }
    summary[vs.INCONCLUSIVE] = inconclusive_totals(checks)
    return summary


def inconclusive_totals(checks: dict[str, dict[str, Any]]) -> dict[str, Any]:
    """``{"cells", "from_time", "checks"}`` over the checks that count toward the verdict."""
    names = [n for n, c in checks.items()
             if check_counts_toward_verdict(c) and int(c.get(vs.INCONCLUSIVE_CELLS, 0) or 0) > 0]
    times = [checks[n][vs.INCONCLUSIVE_FROM_TIME] for n in names
             if checks[n].get(vs.INCONCLUSIVE_FROM_TIME) is not None]
    return {
        vs.CELLS: int(sum(int(checks[n][vs.INCONCLUSIVE_CELLS]) for n in names)),
        vs.FROM_TIME: float(min(times)) if times else None,
        vs.CHECKS: names,
    }


def validate_run(
    run_dir: str | Path,
    discount,
    *,
    ess_warning_share: float,
    extra_assets: Callable[[list[str]], Sequence[MartingaleAsset]] | None = None,
    credit_density: bool = False,
    rates_drivers: Sequence[str] = ("rates",),
    non_lognormal: Sequence[str] = (),
    heston_drivers: Sequence[str] = (),
    heston_unjudged: Mapping[str, str] | None = None,
) -> tuple[dict[str, pd.DataFrame], dict[str, pd.DataFrame], dict[str, Any]]:
    """Compute every table and the summary for a run directory (nothing is written here).

    extra_assets: from a set's column names, the further assets of its martingale test (e.g.
    ``functools.partial(pqflow.validation.assets.martingale_assets, inputs)``); the same
    references serve both sets, the real-world deflator carrying the density. credit_density:
    whether the full densities carry the CIR credit part
    (:func:`pqflow.validation.mean_tests.credit_in_density`). non_lognormal: martingale assets
    judged by the robust t (:func:`pqflow.validation.mean_tests.stochastic_volatility_assets`).
    heston_drivers: the stochastic-volatility indices, whose part makes a density (and a cell it
    deflates) not lognormal (:func:`pqflow.validation.mean_tests.stochastic_volatility_drivers`);
    heston_unjudged: those beyond the measured range, with the reason (their cells are not judged).
    """
    run_dir = Path(run_dir)
    passes = {m: SetPass(scenario_set=ScenarioSet(run_dir=run_dir, measure=m)) for m in _MEASURES}
    return run_steps(passes, validate_run_steps(
        passes, discount, ess_warning_share=ess_warning_share, extra_assets=extra_assets,
        credit_density=credit_density, rates_drivers=rates_drivers, non_lognormal=non_lognormal,
        heston_drivers=heston_drivers, heston_unjudged=heston_unjudged))


def validate_run_steps(
    passes: Mapping[str, SetPass],
    discount,
    *,
    ess_warning_share: float,
    extra_assets: Callable[[list[str]], Sequence[MartingaleAsset]] | None = None,
    credit_density: bool = False,
    rates_drivers: Sequence[str] = ("rates",),
    non_lognormal: Sequence[str] = (),
    heston_drivers: Sequence[str] = (),
    heston_unjudged: Mapping[str, str] | None = None,
) -> Generator[None, None, tuple[dict[str, pd.DataFrame], dict[str, pd.DataFrame], dict[str, Any]]]:
    """:func:`validate_run` as steps on the sets' shared passes
    (:func:`pqflow.validation.run_files.run_steps`)."""
    steps = []
    for measure in _MEASURES:
        scan = passes[measure]
        names = scan.scenario_set.column_names()
        extra = extra_assets(names) if extra_assets is not None else ()
        steps.append(martingale_steps(scan, discount, extra, credit_density=credit_density,
                                      rates_drivers=rates_drivers, non_lognormal=non_lognormal,
                                      heston_drivers=heston_drivers, heston_unjudged=heston_unjudged))
        steps.append(density_steps(scan, credit_density=credit_density, heston_drivers=heston_drivers,
                                   heston_unjudged=heston_unjudged))
    tables = yield from all_steps(steps)
    mart = {m: tables[2 * i] for i, m in enumerate(_MEASURES)}
    dens = {m: tables[2 * i + 1] for i, m in enumerate(_MEASURES)}
    summary = summarise(mart, dens, ess_warning_share=ess_warning_share)
    return mart, dens, summary
