"""Steps of a run's sensitivity sets, as plain functions (the Prefect flow and
``run_in_process`` call them).

Each ``[[sensitivities]]`` entry gets ``sensitivities/<name>/`` in the run, in the layout of a
run: ``inputs/`` (the shocked market-data files), ``calibration.json``,
``scenarios/market_consistent/part-*.parquet`` (and ``scenarios/real_world/`` when asked),
``validation/`` (tables and ``summary.json``). Its parts are simulated with the base run's
root seed, grid and batches, so part ``k`` of a sensitivity draws the very normals of part
``k`` of the base set: common random numbers, which make the difference of a value between the
base and a sensitivity far more precise than between independently seeded sets.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from pqflow import CAUTION
from pqflow.calibration.assemble import Calibration, assemble_calibration
from pqflow.calibration.sensitivity import curve_only_calibration
from pqflow.config.schema import RunConfig, SensitivitySection
from pqflow.errors import CalibrationError
from pqflow.jobs.steps import PartRecord, RunPlan, generate_part, plan_run, write_calibration, written_columns
from pqflow.sensitivities.shocks import shocked_config
from pqflow.simulation.engine import MEASURES
from pqflow.simulation.plan import Batch
from pqflow.storage.jsonio import write_json_atomic
from pqflow.storage.sensitivity_index import (
    SENSITIVITY_DIR,
    sensitivity_index_document,
    sensitivity_index_entry,
    sensitivity_index_path,
)
from pqflow.storage.validation_summary import VALIDATION_SUMMARY, record_sensitivity_verdicts

__all__ = [
    "SENSITIVITY_DIR",
    "manifest_entry",
    "sensitivity_dir",
    "sensitivity_measures",
    "sensitivity_tasks",
    "calibrate_sensitivity",
    "generate_sensitivity_part",
    "validate_sensitivity",
    "record_sensitivities",
    "check_sensitivity_inputs",
]



def sensitivity_dir(run_dir: str | Path, name: str) -> Path:
    return Path(run_dir) / SENSITIVITY_DIR / name


def sensitivity_measures(sens: SensitivitySection) -> tuple[str, ...]:
    return MEASURES if sens.real_world else ("market_consistent",)


def sensitivity_tasks(plan: RunPlan, sens: SensitivitySection) -> list[tuple[str, Batch]]:
    return [(m, b) for m, b in plan.tasks() if m in sensitivity_measures(sens)]


def calibrate_sensitivity(
    config: RunConfig, sens: SensitivitySection, base: Calibration, run_dir: str | Path, *,
    source: str = "configuration"
) -> Calibration:
    """Shock the market data, calibrate (refit everything, or the curve only with
    ``keep_volatility_parameters``) and write ``sensitivities/<name>/calibration.json``."""
    set_dir = sensitivity_dir(run_dir, sens.name)
    set_dir.mkdir(parents=True, exist_ok=True)
    shocked = shocked_config(config, sens, set_dir, source=f"{source} [[sensitivities]] {sens.name!r}")
    try:
        cal = curve_only_calibration(base,
                                     shocked) if sens.keep_volatility_parameters else assemble_calibration(shocked)
    except CalibrationError as exc:
        raise CalibrationError(f"sensitivity {sens.name!r}: {exc}") from None
    if cal.driver_correlation.names != base.driver_correlation.names or (cal.credit is None) != (base.credit is None):
        raise CalibrationError(
            f"sensitivity {sens.name!r}: its model has other drivers than the base run's, so it cannot share its "
            "random numbers"
        )
    cal = _with_sensitivity_record(cal, sens, base)
    written_columns(cal, plan_run(config))
    write_calibration(set_dir, cal)
    return cal


def _with_sensitivity_record(cal: Calibration, sens: SensitivitySection, base: Calibration) -> Calibration:
    from dataclasses import replace

    inputs = {**cal.inputs, "sensitivity": sens.model_dump(mode="json", exclude_none=True),
              "base_calibration_sha256": base.inputs_hash}
    return replace(cal, inputs=inputs)


def generate_sensitivity_part(
    calibration: Calibration, plan: RunPlan, name: str, measure: str, batch: Batch, run_dir: str | Path
) -> PartRecord:
    """One part of a sensitivity set (the base run's seed, measure stream and batch index); the
    record's path is relative to the run directory."""
    rec = generate_part(calibration, plan, measure, batch, sensitivity_dir(run_dir, name))
    return PartRecord(
        measure=rec.measure, batch=rec.batch, path=f"{SENSITIVITY_DIR}/{name}/{rec.path}", rows=rec.rows,
        sha256=rec.sha256, bytes=rec.bytes,
    )


def validate_sensitivity(run_dir: str | Path, sens: SensitivitySection, config: RunConfig) -> dict[str, Any]:
    """The checks of one sensitivity set, written to its ``validation/``; returns its summary."""
    from pqflow.jobs.steps import _stack
    from pqflow.storage.results import write_csv_atomic
    from pqflow.validation.evidence import run_checks
    from pqflow.validation.sensitivity_checks import run_market_consistent_checks

    set_dir = sensitivity_dir(run_dir, sens.name)
    share = config.validation.ess_warning_share
    result = run_checks(set_dir, ess_warning_share=share) if sens.real_world else run_market_consistent_checks(
        set_dir, ess_warning_share=share)
    out = set_dir / "validation"
    out.mkdir(parents=True, exist_ok=True)
    tables = {"martingale": _stack(result.martingale), "density": _stack(result.density), **result.tables}
    for name, frame in tables.items():
        write_csv_atomic(frame, out / f"{name}.csv")
    summary = {"caution": CAUTION, "sensitivity": sens.name, **result.summary}
    write_json_atomic(out / "summary.json", summary)
    return summary


def record_sensitivities(run_dir: str | Path, config: RunConfig, summaries: dict[str, dict[str, Any]]) -> dict[str,
                                                                                                               Any]:
    """Add the sensitivities to the run's ``validation/summary.json`` (their verdicts count toward
    the run's) and write ``sensitivities/index.json``; return the updated run summary."""
    run_dir = Path(run_dir)
    index = sensitivity_index_document([
        sensitivity_index_entry(
            name=s.name,
            description=s.description,
            measures=sensitivity_measures(s),
            keep_volatility_parameters=s.keep_volatility_parameters,
            shocks={k: v for k, v in s.model_dump(mode="json", exclude_none=True).items()
                    if k not in ("name", "description", "keep_volatility_parameters", "real_world")},
            verdict=summaries[s.name]["verdict"],
        )
        for s in config.sensitivities
    ])
    write_json_atomic(sensitivity_index_path(run_dir), index)
    return record_sensitivity_verdicts(
        run_dir / VALIDATION_SUMMARY, {s.name: summaries[s.name]["verdict"] for s in config.sensitivities},
        {s.name: f"{SENSITIVITY_DIR}/{s.name}/{VALIDATION_SUMMARY}" for s in config.sensitivities})


def manifest_entry(config: RunConfig) -> dict[str, Any]:
    """The ``sensitivities`` entry of the run's manifest header."""
    return {
        "sensitivities": [
            {"name": s.name, "path": f"{SENSITIVITY_DIR}/{s.name}", "measures": list(sensitivity_measures(s)),
             "seeds": "the base run's root seed, measure streams and batches (common random numbers)"}
            for s in config.sensitivities
        ]
    }


def check_sensitivity_inputs(config: RunConfig, *, source: str = "configuration") -> None:
    """Apply every sensitivity's shocks in a scratch folder (no calibration): a shock that finds
    nothing to act on, or a bad shift file, is refused before any run starts."""
    import shutil
    import tempfile

    scratch = Path(tempfile.mkdtemp(prefix="pqflow-sensitivities-"))
    try:
        for sens in config.sensitivities:
            shocked_config(config, sens, scratch / sens.name, source=f"{source} [[sensitivities]] {sens.name!r}")
    finally:
        shutil.rmtree(scratch, ignore_errors=True)
