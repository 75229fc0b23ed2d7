"""The checks of a sensitivity set that has the market-consistent set only.

The martingale and density tests and the repricing of the calibration instruments run on that
set exactly as on a base run (same tables, same family-wise rule); the real-world targets and
the reconciliation of the two sets need a real-world set, and are reported as not applicable
with that reason. A sensitivity that also writes a real-world set gets every check
(:func:`pqflow.validation.evidence.run_checks`).
"""

from __future__ import annotations

from functools import partial
from pathlib import Path

from pqflow.storage import validation_summary as vs
from pqflow.storage.calibration_file import calibration_path, calibration_record
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.validation.assets import martingale_assets
from pqflow.validation.checks import not_applicable_entry
from pqflow.validation.density import density_table
from pqflow.validation.evidence import _KINDS, RULE, RunValidation, overall_verdict
from pqflow.validation.market_consistency import market_consistency_check
from pqflow.validation.martingale import martingale_table
from pqflow.validation.mean_tests import stochastic_volatility_assets
from pqflow.validation.run_files import json_safe, load_run_inputs
from pqflow.validation.summary import summarise

__all__ = ["run_market_consistent_checks"]

MEASURE = "market_consistent"


def run_market_consistent_checks(run_dir: str | Path, *, ess_warning_share: float) -> RunValidation:
    """Every check that the market-consistent set alone allows (nothing is written here)."""
    inputs = load_run_inputs(run_dir)
    reader = ScenarioSet(run_dir=Path(run_dir), measure=MEASURE)
    extra = partial(martingale_assets, inputs)(reader.column_names())
    mart = {MEASURE: martingale_table(reader, inputs.curve.discount, extra,
                                      non_lognormal=stochastic_volatility_assets(
                                          calibration_record(inputs.calibration, calibration_path(inputs.run_dir))
                                          .stochastic_volatility))}
    dens = {MEASURE: density_table(reader)}
    base = summarise(mart, dens, ess_warning_share=ess_warning_share)
    checks = {}
    for name, entry in base["checks"].items():
        kind, source = _KINDS[name.split("_", 1)[0]]
        checks[name] = {**entry, vs.KIND: kind, vs.SOURCE: source, vs.COUNTS_TOWARD_VERDICT: True,
                        vs.WARNINGS: list(entry.get(vs.WARNINGS, []))}
    result = market_consistency_check(inputs, measures=(MEASURE,))
    checks[result.name] = result.summary
    reason = "not applicable: this sensitivity has no real-world set (real_world = false)"
    checks["real_world"] = not_applicable_entry(kind="real-world targets", reason=reason)
    checks["reconciliation"] = not_applicable_entry(kind="reconciliation of the two sets", reason=reason)
    summary = {vs.VERDICT: overall_verdict(checks), vs.RULE: RULE, vs.CHECKS: checks}
    return RunValidation(martingale=mart, density=dens, tables=dict(result.tables), summary=json_safe(summary))
