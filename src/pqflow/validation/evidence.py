"""Every check of a run, computed from its written files, and the summary that judges them.

Checks (keys of ``summary["checks"]``):

* ``martingale_market_consistent``, ``martingale_real_world``: the "1 = 1" test
  (:mod:`pqflow.validation.martingale`), on bonds, indices and the configured parts' claims
  (CPI, real and defaultable bonds: :mod:`pqflow.validation.assets`);
* ``density_market_consistent``, ``density_real_world``: density weights
  (:mod:`pqflow.validation.density`);
* ``market_consistency``: calibration instruments repriced from the files
  (:mod:`pqflow.validation.market_consistency`; ``not_applicable`` without instruments);
* ``real_world``: the P set against its targets, with the wealth-ratio benchmark nested
  (:mod:`pqflow.validation.real_world`);
* ``reconciliation``: a guarantee valued three ways (:mod:`pqflow.validation.reconciliation`).

The run's ``verdict`` is ``"fail"`` when any check that counts toward it fails, else
``"inconclusive"`` when any such check is inconclusive (a cell without the power to see a
material deviation), else ``"pass"``; a check that is ``not_applicable`` neither passes nor
fails the run. ``summary["inconclusive"]`` counts the inconclusive cells and gives the earliest
time of one; ``summary["densities"]`` gives each density column's usable horizon and
``summary["density_budget"]`` each price of risk's share of the log-density variance at the
horizon (:mod:`pqflow.measure.budget`; the full table is ``density_budget.csv``).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import partial
from pathlib import Path
from typing import Any

import pandas as pd

from pqflow.errors import ConfigError
from pqflow.storage import validation_summary as vs
from pqflow.storage.calibration_file import calibration_path, calibration_record
from pqflow.storage.validation_summary import VERDICT, check_counts_toward_verdict
from pqflow.validation.assets import martingale_assets
from pqflow.validation.market_consistency import market_consistency_steps
from pqflow.validation.mean_tests import (
    credit_in_density,
    stochastic_volatility_assets,
    stochastic_volatility_drivers,
    unmeasured_heston_drivers,
)
from pqflow.validation.real_world import real_world_steps
from pqflow.validation.reconciliation import reconciliation_steps
from pqflow.validation.run_files import all_steps, json_safe, load_run_inputs, run_steps, set_passes
from pqflow.validation.summary import VERDICT_RULE, combine_verdicts, inconclusive_totals, validate_run_steps

__all__ = ["RunValidation", "run_checks", "overall_verdict", "RULE"]

RULE = VERDICT_RULE + " (market quotes: within their stated volatility tolerance plus that interval)"

_KINDS = {
    "martingale": ("deflated asset prices average to today's prices (1 = 1 test)",
                   "Society of Actuaries, Economic Scenario Generators: A Practical Guide, 2016, s. 8.3; "
                   "CPI and real bonds: Brigo and Mercurio, Interest Rate Models, 2006, ch. 15; "
                   "defaultable bonds (recovery of market value): Duffie and Singleton, Rev. Financ. "
                   "Stud. 12 (1999)"),
    "density": ("density weights average to 1; effective sample size and largest weight share",
                "E[Z_t] = 1 for a density process; effective sample size as Kong (1992) defines it"),
}


@dataclass(frozen=True, kw_only=True)
class RunValidation:
    """Tables and summary of every check of a run.

    martingale, density: measure -> table (as :func:`pqflow.validation.summary.validate_run`).
    tables: file stem -> table for the other checks (``market_consistency``,
    ``real_world_targets``, ``real_world_statistics``, ``real_world_percentiles``,
    ``wealth_ratio_benchmark``, ``reconciliation``, ``expected_returns``; a check that did not
    run has none). summary: the content of ``validation/summary.json`` (JSON-safe).
    """

    martingale: dict[str, pd.DataFrame]
    density: dict[str, pd.DataFrame]
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    summary: dict[str, Any] = field(default_factory=dict)


def overall_verdict(checks: dict[str, dict[str, Any]]) -> str:
    """``"fail"`` if a check counting toward the verdict failed, else ``"inconclusive"`` if one
    is inconclusive, else ``"pass"``."""
    return combine_verdicts([c.get(VERDICT, "") for c in checks.values() if check_counts_toward_verdict(c)])


def density_budget_for_run(inputs) -> tuple[pd.DataFrame | None, dict[str, dict[str, float]]]:
    """The density budget of a run (:func:`pqflow.measure.budget.density_budget`) from its
    ``calibration.json`` (the model rebuilt from the record) and each set's output grid; and
    each price of risk's share at each set's last time. A record the model cannot be rebuilt
    from gives no table and an empty budget (the checks themselves need only the files)."""
    from pqflow.calibration.assemble import build_model, load_calibration
    from pqflow.measure.budget import density_budget

    try:
        cal = load_calibration(calibration_path(inputs.run_dir))
        model = build_model(cal, ())
    except (KeyError, TypeError, ValueError):
        return None, {}
    grids = {}
    for measure in ("real_world", "market_consistent"):
        grids[measure], _ = inputs.reader(measure).head()
    table = density_budget(model, cal.credit, grids)
    at_horizon: dict[str, dict[str, float]] = {}
    for measure_key, rows in table.groupby("measure", sort=False):
        last = rows[rows["time"] == rows["time"].max()]
        at_horizon[str(measure_key)] = {str(p): float(v) for p, v in zip(last["price_of_risk"],
                                                                      last["share"].to_numpy(dtype=float), strict=True)}
    return table, at_horizon


def run_checks(
    run_dir: str | Path,
    *,
    ess_warning_share: float,
    vol_tolerance: dict[str, float] | None = None,
    wealth_benchmark_gating: bool = False,
    guarantee_maturity: float = 10.0,
    guarantee: float | None = None,
) -> RunValidation:
    """Run every check on the files of ``run_dir`` (nothing is written here).

    vol_tolerance: per quote convention, the volatility (decimal) by which a repriced market
    quote may miss (default :data:`pqflow.validation.market_consistency.DEFAULT_VOL_TOLERANCE`).
    wealth_benchmark_gating: let the 2005 wealth-ratio benchmark decide the real-world verdict.
    guarantee_maturity, guarantee: the reconciled maturity guarantee (default strike: the index
    level at time 0).
    """
    inputs = load_run_inputs(run_dir)
    record = calibration_record(inputs.calibration, calibration_path(inputs.run_dir))
    try:
        credit_part = record.credit
    except ConfigError:  # unreadable: the credit columns of the files decide
        credit_part = None
    credit = credit_in_density(credit_part, inputs.reader("real_world").column_names())
    # every check registers what it reads of each set; each part is then read once for all of them
    passes = set_passes(inputs)
    (mart, dens, base), *results = run_steps(passes, all_steps([
        validate_run_steps(passes, inputs.curve.discount, ess_warning_share=ess_warning_share,
                           extra_assets=partial(martingale_assets, inputs), credit_density=credit,
                           rates_drivers=inputs.rates_drivers,
                           non_lognormal=tuple(stochastic_volatility_assets(record.stochastic_volatility)),
                           heston_drivers=tuple(stochastic_volatility_drivers(record.stochastic_volatility)),
                           heston_unjudged=unmeasured_heston_drivers(record.stochastic_volatility)),
        market_consistency_steps(inputs, passes, vol_tolerance=vol_tolerance),
        real_world_steps(inputs, passes, wealth_benchmark_gating=wealth_benchmark_gating),
        reconciliation_steps(inputs, passes, maturity=guarantee_maturity, guarantee=guarantee),
    ]))
    checks: dict[str, dict[str, Any]] = {}
    for name, entry in base["checks"].items():
        family = name.split("_", 1)[0]
        kind, source = _KINDS[family]
        checks[name] = {**entry, "kind": kind, "source": source, "counts_toward_verdict": True,
                        "warnings": list(entry.get("warnings", []))}
    tables: dict[str, pd.DataFrame] = {}
    for result in results:
        checks[result.name] = result.summary
        tables.update(result.tables)
    budget_table, budget = density_budget_for_run(inputs)
    if budget_table is not None:
        tables["density_budget"] = budget_table
    summary = {
        vs.VERDICT: overall_verdict(checks),
        vs.RULE: RULE,
        vs.INCONCLUSIVE: inconclusive_totals(checks),
        vs.CHECKS: checks,
        vs.DENSITIES: base[vs.DENSITIES],
        vs.DENSITY_BUDGET: budget,
    }
    return RunValidation(martingale=mart, density=dens, tables=tables, summary=json_safe(summary))
