"""Steps of a run: plan, calibrate, generate each part, validate, write the manifest.

Each step reads and writes through ``pqflow.storage`` and returns a small record, so a
scheduler (the Prefect flow, or a plain loop in tests) can run the parts in any order and on
any worker: the bytes of a part depend only on the configuration, the seed, the measure and
the batch index.
"""

from __future__ import annotations

import datetime as dt
import fnmatch
import json
import platform
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa

from pqflow import CAUTION, __version__
from pqflow.calibration.assemble import Calibration, build_model
from pqflow.config.loader import config_hash
from pqflow.config.schema import RunConfig
from pqflow.errors import ConfigError, IntegrityError
from pqflow.measure.blocks import DensityBlock, check_blocks, default_blocks, economy_structure
from pqflow.models.economy import EconomyModel
from pqflow.simulation.engine import time_grid
from pqflow.simulation.plan import Batch, plan_batches
from pqflow.simulation.scenarios import simulate_part
from pqflow.simulation.streams import MEASURE_STREAM
from pqflow.storage import manifest as mf
from pqflow.storage import names
from pqflow.storage.calibration_file import calibration_path, write_calibration_file
from pqflow.storage.jsonio import write_json_atomic
from pqflow.storage.manifest import MANIFEST, build_manifest, manifest_record
from pqflow.storage.names import (
    DENSITY_UNIT,
    MEASURES,
    VARIANCE_UNIT,
    density_block_column,
    density_column,
    variance_column,
)
from pqflow.storage.parquet import batch_table, part_name, units_metadata, write_part_hashed
from pqflow.storage.validation_summary import VALIDATION_SUMMARY, read_validation_summary

__all__ = [
    "RunPlan",
    "SetPlan",
    "PartRecord",
    "plan_run",
    "calibrate_step",
    "write_calibration",
    "generate_part",
    "validate_staged_run",
    "write_validation",
    "revalidate_run",
    "write_run_manifest",
    "written_columns",
    "REQUIRED_COLUMNS",
    "run_density_blocks",
]

MEASURE_TEXT = {
    "real_world": "real-world measure P (projection set); q_density = dQ/dP on the grid",
    "market_consistent": "market-consistent measure Q, bank-account numeraire; p_density = dP/dQ",
}


@dataclass(frozen=True, kw_only=True)
class SetPlan:
    """Output grid and batches of one scenario set."""

    times: np.ndarray
    batches: tuple[Batch, ...]


@dataclass(frozen=True, kw_only=True)
class RunPlan:
    """Output grids and batches of both sets (they may differ per set)."""

    sets: dict[str, SetPlan]
    seed: int
    antithetic: bool
    bond_maturities: tuple[float, ...]
    #: ``outputs.columns``: names or patterns of the columns to write (``None``: all).
    column_patterns: tuple[str, ...] | None = None
    #: blocks whose restricted densities each set carries (``[density_blocks]``)
    density_blocks: tuple[DensityBlock, ...] = ()

    def times_for(self, measure: str) -> np.ndarray:
        return self.sets[measure].times

    def batches_for(self, measure: str) -> tuple[Batch, ...]:
        return self.sets[measure].batches

    def tasks(self) -> list[tuple[str, Batch]]:
        """Every (measure, batch) pair, interleaved so both sets advance together."""
        out = []
        longest = max(len(p.batches) for p in self.sets.values())
        for i in range(longest):
            for m in MEASURES:
                if i < len(self.sets[m].batches):
                    out.append((m, self.sets[m].batches[i]))
        return out


@dataclass(frozen=True, kw_only=True)
class PartRecord:
    """What a written part is: enough to check it against the manifest later."""

    measure: str
    batch: int
    path: str
    rows: int
    sha256: str
    #: the size written, with ``sha256`` taken from the bytes as written (None: not known, e.g. a
    #: part kept from an interrupted attempt); the manifest then trusts the digest while the
    #: file keeps that size instead of reading the part again
    bytes: int | None = None


def run_density_blocks(config: RunConfig) -> tuple[DensityBlock, ...]:
    """The run's density blocks (``[density_blocks]``, or the defaults), each checked to be
    autonomous from the configured models' structure: nothing needs fitting for that."""
    from pqflow.calibration.parts import credit_driver
    from pqflow.models.economy import INFLATION_DRIVER, RATES_DRIVERS, REAL_RATE_DRIVER
    from pqflow.models.parts import PART_KINDS

    rates = RATES_DRIVERS[config.rates.model]
    indices = [(i.name, names.index_column(i.kind, i.name)) for i in config.index_specs]
    inflation = (REAL_RATE_DRIVER, INFLATION_DRIVER) if config.inflation is not None else None
    ratings = {r.name: credit_driver(r.name) for r in (config.credit.ratings if config.credit is not None else ())}
    plugged = {name: PART_KINDS[name].drivers(section) for name, section in config.parts.items()}
    structure = economy_structure(rates, indices, inflation, ratings, plugged)
    if config.density_blocks is None:
        blocks = default_blocks(rates, [d for d, _ in indices], inflation, ratings, plugged)
    else:
        blocks = tuple(
            DensityBlock(name=name, drivers=tuple(dict.fromkeys(
                x for d in drivers for x in (rates if d == "rates" else (d,)))))
            for name, drivers in config.density_blocks.items()
        )
    try:
        check_blocks(blocks, structure)
    except ValueError as exc:
        raise ConfigError(f"density_blocks: {exc}") from None
    return blocks


def plan_run(config: RunConfig) -> RunPlan:
    sim = config.simulation
    sets = {}
    for measure in MEASURES:
        scenarios, horizon, spy = sim.grid(measure)
        sets[measure] = SetPlan(
            times=time_grid(horizon, spy),
            batches=plan_batches(scenarios, sim.batch_size, antithetic=sim.antithetic),
        )
    return RunPlan(
        sets=sets,
        seed=sim.seed,
        antithetic=sim.antithetic,
        bond_maturities=tuple(config.outputs.bond_maturities),
        column_patterns=tuple(config.outputs.columns) if config.outputs.columns is not None else None,
        density_blocks=run_density_blocks(config),
    )


#: Columns every part carries whatever ``outputs.columns`` says (the density is added by measure).
REQUIRED_COLUMNS = (names.SHORT_RATE, names.CASH_ACCOUNT, names.DEFLATOR)


def written_columns(calibration: Calibration, plan: RunPlan, model: EconomyModel | None = None) -> list[str]:
    """The columns a part carries, in file order (before the density column): the required
    ones, then every column of the configured models that ``outputs.columns`` selects.
    ``model``: the run's model when the caller has built it already."""
    if model is None:
        model = build_model(calibration, plan.bond_maturities)
    known = [c for c in model.known_columns() if c not in REQUIRED_COLUMNS]
    if calibration.credit is not None:
        known += list(calibration.credit.column_names())
    on_request = [variance_column(n) for n in calibration.stochastic_volatility]  # only when asked for
    if plan.column_patterns is None:
        return [*REQUIRED_COLUMNS, *known]
    known += on_request
    unmatched = [p for p in plan.column_patterns if not any(fnmatch.fnmatchcase(c, p) for c in (*REQUIRED_COLUMNS,
                                                                                                *known))]
    if unmatched:
        raise ConfigError(
            f"outputs.columns: {', '.join(repr(p) for p in unmatched)} matches no column of the configured "
            f"models; the columns are: {', '.join(known)}"
        )
    chosen = [c for c in known if any(fnmatch.fnmatchcase(c, p) for p in plan.column_patterns)]
    needs = []  # a claim's martingale test needs the columns that make its currency value
    if any(c.startswith(names.REAL_BOND_PREFIX) for c in chosen) and names.CPI not in chosen:
        needs.append("real bonds need 'cpi' (their currency price is cpi times the real bond)")
    for c in chosen:
        if c.startswith(names.DZCB_PREFIX):
            losses = names.cumulative_intensity_column(names.dzcb_rating(c))
            if losses not in chosen:
                needs.append(f"{c} needs '{losses}' (its default losses)")
    if needs:
        raise ConfigError("outputs.columns: " + "; ".join(dict.fromkeys(needs)))
    return [*REQUIRED_COLUMNS, *chosen]


def write_calibration(run_dir: str | Path, calibration: Calibration) -> Path:
    return write_calibration_file(calibration_path(run_dir), calibration.to_json())


def calibrate_step(config: RunConfig, run_dir: str | Path, calibration_file: str | Path | None = None) -> Calibration:
    """Fit the calibration (or read a stored one, without refitting) and write it to the run."""
    from pqflow.calibration.assemble import assemble_calibration, check_calibration_fits, load_calibration

    if calibration_file is None:
        calibration = assemble_calibration(config)
    else:
        calibration = load_calibration(calibration_file)
        check_calibration_fits(calibration, config, source=str(calibration_file))
    written_columns(calibration, plan_run(config))  # outputs.columns checked before any simulation
    write_calibration(run_dir, calibration)
    return calibration


def _part_metadata(calibration: Calibration, plan: RunPlan, measure: str, batch: Batch, units: dict[str,
                                                                                                    str]) -> dict[str,
                                                                                                                  str]:
    return {
        names.META_VERSION: __version__,
        names.META_MEASURE: measure,
        names.META_MEASURE_DESCRIPTION: MEASURE_TEXT[measure],
        names.META_VALUATION_DATE: calibration.valuation_date,
        names.META_TIME_UNIT: "years from the valuation date (output grid k / steps_per_year)",
        names.META_COMPOUNDING: "short_rate is continuously compounded per year; prices are not rates",
        names.META_UNITS: units_metadata(units),
        names.META_DENSITY_COLUMN: density_column(measure),
        names.META_ANTITHETIC: "true" if plan.antithetic else "false",
        names.META_BATCH: str(batch.index),
        names.META_FIRST_SCENARIO: str(batch.first),
        names.META_CALIBRATION_SHA256: calibration.inputs_hash,
        names.META_DENSITY_BLOCKS: json.dumps({b.name: list(b.drivers) for b in plan.density_blocks}),
    }


def generate_part(
    calibration: Calibration, plan: RunPlan, measure: str, batch: Batch, run_dir: str | Path
) -> PartRecord:
    """Simulate one batch of one measure and write it as a Parquet part."""
    model = build_model(calibration, plan.bond_maturities)
    credit = calibration.credit
    cols = simulate_part(
        model, plan.times_for(measure), measure=measure, n_paths=batch.size, seed=plan.seed, batch=batch.index,
        antithetic=plan.antithetic, credit=credit, credit_substeps_per_year=calibration.credit_substeps_per_year,
        density_blocks=plan.density_blocks, heston=tuple(calibration.stochastic_volatility.values()),
    )
    units = model.column_units()
    for spec in calibration.stochastic_volatility.values():
        units[variance_column(spec.name)] = VARIANCE_UNIT
    if credit is not None:
        units.update(credit.column_units())
    units[names.DEFLATOR] = names.deflator_unit(measure)
    units[density_column(measure)] = DENSITY_UNIT
    blocks = [density_block_column(measure, b.name) for b in plan.density_blocks]
    for b, column in zip(plan.density_blocks, blocks, strict=True):
        units[column] = (
            f"density restricted to the states of drivers {', '.join(b.drivers)}, on the grid up to time "
            "(dimensionless, mean 1)"
        )
    order = written_columns(calibration, plan, model)
    order += [density_column(measure), *blocks]
    table = batch_table(
        {c: cols[c] for c in order},
        plan.times_for(measure),
        first_scenario=batch.first,
        metadata=_part_metadata(calibration, plan, measure, batch, {c: units[c] for c in order}),
    )
    path, sha256 = write_part_hashed(table, Path(run_dir) / "scenarios" / measure / part_name(batch.index))
    return PartRecord(
        measure=measure,
        batch=batch.index,
        path=path.relative_to(Path(run_dir)).as_posix(),
        rows=table.num_rows,
        sha256=sha256,
        bytes=path.stat().st_size,
    )


def validate_staged_run(run_dir: str | Path, config: RunConfig) -> dict[str, Any]:
    """Every check from the files (martingale, density, market consistency, real world,
    reconciliation); writes ``validation/`` (one CSV per table and ``summary.json``)."""
    return write_validation(run_dir, ess_warning_share=config.validation.ess_warning_share)


def write_validation(run_dir: str | Path, *, ess_warning_share: float) -> dict[str, Any]:
    """Run every check on the files of ``run_dir`` and put a fresh ``validation/`` in place:
    the tables and ``summary.json`` are written to a sibling folder first, which then replaces
    the old one (:func:`pqflow.storage.results.replace_directory`), so a failed check run leaves
    the earlier ``validation/`` whole. An existing ``report.html`` is carried over (the caller
    re-renders it)."""
    from pqflow.storage.results import discard_folder_scratch, write_table_folder
    from pqflow.validation.evidence import run_checks

    run_dir = Path(run_dir)
    discard_folder_scratch(run_dir, "validation")  # left by a process killed mid-write
    result = run_checks(run_dir, ess_warning_share=ess_warning_share)
    tables = {"martingale": _stack(result.martingale), "density": _stack(result.density), **result.tables}
    summary = {"caution": CAUTION, **result.summary}
    write_table_folder(run_dir, "validation", tables, summary, carry_over=("report.html",))
    return summary


def revalidate_run(run_dir: str | Path, *, ess_warning_share: float | None = None) -> dict[str, Any]:
    """``pqflow validate``: check every file against ``manifest.json`` first, re-run every check
    from the files and ``calibration.json``, put a fresh ``validation/`` in place and record its
    files in the manifest again (the scenario files are unchanged; the header gains
    ``revalidated_utc``). ``ess_warning_share``: default the one the run's earlier summary
    records, else 0.10."""
    from pqflow.storage.manifest import verify_run
    from pqflow.storage.results import discard_folder_scratch

    run_dir = Path(run_dir)
    # our own scratch, left by a validate killed mid-write: removed before the manifest check lists unlisted files
    discard_folder_scratch(run_dir, "validation")
    manifest = verify_run(run_dir)
    if ess_warning_share is None:
        ess_warning_share = 0.10
        earlier = run_dir / VALIDATION_SUMMARY
        if earlier.is_file():
            try:
                density = read_validation_summary(earlier).check("density_real_world")
                recorded = density.ess_warning_share if density is not None else None
                if recorded is not None:
                    ess_warning_share = float(recorded)
            except (IntegrityError, TypeError, ValueError):
                pass
    summary = write_validation(run_dir, ess_warning_share=ess_warning_share)
    header = manifest_record(manifest).header()
    header[mf.REVALIDATED_UTC] = dt.datetime.now(dt.UTC).isoformat(timespec="seconds")
    write_json_atomic(run_dir / MANIFEST, build_manifest(run_dir, header=header))
    return summary


def _stack(tables: dict[str, Any]):
    """Tables by measure stacked into one, with the measure as the first column."""
    import pandas as pd

    return pd.concat([t.assign(measure=m)[["measure", *t.columns]] for m, t in tables.items()], ignore_index=True)


def write_run_manifest(
    run_dir: str | Path, config: RunConfig, plan: RunPlan, parts: list[PartRecord], *, run_id: str,
    extra_header: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """Write ``manifest.json`` and check it against the records the parts returned.
    ``extra_header``: further header entries (the sensitivity sets)."""
    run_dir = Path(run_dir)
    header = {
        mf.RUN_ID: run_id,
        mf.RUN_NAME: config.run.name,
        mf.CREATED_UTC: dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        mf.PQFLOW_VERSION: __version__,
        mf.PYTHON: platform.python_version(),
        mf.NUMPY: np.__version__,
        mf.PYARROW: pa.__version__,
        mf.VALUATION_DATE: config.run.valuation_date.isoformat(),
        mf.CONFIG_SHA256: config_hash(config),
        mf.SEEDS: {
            mf.ROOT_SEED: plan.seed,
            mf.SEED_SCHEME: "numpy SeedSequence(root_seed, spawn_key=(measure_stream, batch)), PCG64",
            mf.MEASURE_STREAMS: MEASURE_STREAM,
            mf.BATCHES: {m: len(p.batches) for m, p in plan.sets.items()},
        },
        mf.SCENARIOS: {m: int(sum(b.size for b in p.batches)) for m, p in plan.sets.items()},
        mf.OUTPUT_TIMES: {m: int(p.times.size) for m, p in plan.sets.items()},
        mf.HORIZON_YEARS: {m: float(p.times[-1]) for m, p in plan.sets.items()},
        mf.ANTITHETIC: plan.antithetic,
        mf.CAUTION: CAUTION,
        **(extra_header or {}),
    }
    if config.signoff is not None:  # names for the report's sign-off page
        header[mf.SIGNOFF] = config.signoff.model_dump(mode="json")
    # a part's digest as its writer took it, trusted while the file keeps the size written (the
    # staging folder is the run's own, under its lock); every other file is hashed
    written = {rec.path: (rec.sha256, int(rec.bytes)) for rec in parts if rec.bytes is not None}
    manifest = build_manifest(run_dir, header=header, known=written)
    by_path = manifest_record(manifest).file_entries()
    for rec in parts:
        entry = by_path.get(rec.path)
        if entry is None or entry.sha256 != rec.sha256 or entry.rows != rec.rows:
            raise RuntimeError(f"{rec.path}: changed between writing and the manifest")
    write_json_atomic(run_dir / MANIFEST, manifest)
    return manifest
