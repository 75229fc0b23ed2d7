"""The valuation job as plain functions: what ``pqflow value`` and the Prefect flow call.

    portfolio = load_portfolio(path)                     read and validate the file
    mc = value_run(run_dir, portfolio, "market_consistent")
    rw = value_run(run_dir, portfolio, "real_world")     independent of mc: may run in parallel
    summary = publish_valuation(portfolio, info, mc, rw, out_dir)   tables + summary.json

``value_liabilities_cli`` does all of it in one call.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

from pqflow import __version__
from pqflow.liabilities.portfolio import Portfolio, load_portfolio
from pqflow.liabilities.sensitivities import sensitivity_names, sensitivity_summary, value_sensitivities
from pqflow.liabilities.tables import cash_flow_frame, results_frame, valuation_summary, valuation_table_rows
from pqflow.liabilities.valuation import RunInfo, SetValuation, check_portfolio_against_run, inspect_run, value_run
from pqflow.storage import names
from pqflow.storage.jsonio import write_json_atomic
from pqflow.storage.parquet import file_sha256
from pqflow.storage.results import write_result_tables
from pqflow.storage.rundir import discard_staging, run_lock
from pqflow.storage.valuation_files import (
    VALUATION_MANIFEST,
    check_valuation_target,
    fresh_valuation_staging,
    publish_valuation_files,
    run_manifest_sha256,
)

__all__ = [
    "VALUATION_DIR",
    "RESULT_TABLES",
    "default_out_dir",
    "publish_valuation",
    "value_liabilities_cli",
    "valuation_table_rows",
]

VALUATION_DIR = "valuation"
RESULT_TABLES = ("liability_values", "liability_cash_flows")


def default_out_dir(run_dir: str | Path) -> Path:
    """``run_dir/valuation``: beside the run's files, outside the run's manifest (which it leaves
    as is), with a manifest of its own."""
    return Path(run_dir) / VALUATION_DIR


def publish_valuation(
    portfolio: Portfolio, info: RunInfo, mc: SetValuation, rw: SetValuation, out_dir: str | Path,
    *, overwrite: bool = False, sensitivities: Any = None,
) -> dict[str, Any]:
    """Write ``liability_values`` and ``liability_cash_flows`` (Parquet and CSV),
    ``summary.json`` and the valuation manifest to ``out_dir``; return the summary.
    ``sensitivities``: the table of :func:`pqflow.liabilities.sensitivities.value_sensitivities`
    (BE, guarantee and TVOG per sensitivity and line, the change from the base and its paired
    and independent-sets standard errors), written beside them as ``sensitivities`` with its
    totals in the summary.

    The same rules as a run (:mod:`pqflow.storage.valuation_files`): written in a staging
    folder under a lock and published by rename, so a failure leaves earlier results as they
    were; earlier results are replaced only with ``overwrite``. Paths in the summary are
    relative to ``out_dir`` (``files``) or bare file names (``portfolio_file``, ``run_dir``).
    """
    out = Path(out_dir)
    results = results_frame(mc, rw)
    summary = valuation_summary(portfolio, info, mc, rw, results)
    source = Path(portfolio.source)
    summary["portfolio_file"] = source.name
    summary["run_dir"] = Path(info.run_dir).name
    summary["portfolio_sha256"] = file_sha256(source) if source.is_file() else None
    summary["pqflow_version"] = __version__
    metadata = {
        names.META_VERSION: __version__,
        names.META_INSURER: portfolio.insurer,
        names.META_CURRENCY: portfolio.currency,
        names.META_VALUATION_DATE: info.valuation_date,
        names.META_RUN_ID: info.run_id or "",
        names.META_CAUTION: summary["caution"],
    }
    header = {
        "run_id": info.run_id,
        "run_manifest_sha256": run_manifest_sha256(info.run_dir),
        "portfolio_file": source.name,
        "portfolio_sha256": summary["portfolio_sha256"],
        "created_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "pqflow_version": __version__,
        "caution": summary["caution"],
    }
    try:
        with run_lock(out):
            check_valuation_target(out, overwrite)
            staging = fresh_valuation_staging(out)
            try:
                tables = {"liability_values": results, "liability_cash_flows": cash_flow_frame(mc, rw)}
                if sensitivities is not None:
                    tables["sensitivities"] = sensitivities
                    summary["sensitivities"] = sensitivity_summary(sensitivities)
                    summary["sensitivities_note"] = (
                        "change = sensitivity - base on the same scenarios (common random numbers); "
                        "change_se_paired from the paired differences, change_se_independent = "
                        "sqrt(SE_base^2 + SE_sensitivity^2), what independently seeded sets would give; "
                        "values are plain means"
                    )
                written = write_result_tables(staging, tables, metadata=metadata)
                summary["files"] = {name: name for name in [*written, "summary.json", VALUATION_MANIFEST]}
                write_json_atomic(staging / "summary.json", summary)
                publish_valuation_files(staging, out, header=header, overwrite=overwrite)
            except BaseException:
                discard_staging(staging)
                raise
    except OSError as exc:
        if exc.filename is None:  # a write error that names no file (the Parquet writer): name the target
            raise OSError(exc.errno, exc.strerror or str(exc), str(out)) from exc
        raise
    return summary


def value_liabilities_cli(
    run_dir: str | Path, liabilities_path: str | Path, out_dir: str | Path | None = None, *, overwrite: bool = False
) -> dict[str, Any]:
    """Value the portfolio in ``liabilities_path`` on both sets of the run in ``run_dir``.

    Writes to ``out_dir`` (default ``run_dir/valuation``) and returns the summary dict (see
    :func:`pqflow.liabilities.tables.valuation_summary`; ``summary["files"]`` lists the files).
    Raises ``LiabilityDataError`` (a ``PqflowError``) on a bad portfolio, before any file is
    written.
    """
    out = Path(out_dir) if out_dir is not None else default_out_dir(run_dir)
    check_valuation_target(out, overwrite)  # refused before anything is valued
    portfolio = load_portfolio(liabilities_path)
    info = inspect_run(run_dir)
    check_portfolio_against_run(portfolio, info)
    mc = value_run(run_dir, portfolio, "market_consistent")
    rw = value_run(run_dir, portfolio, "real_world")
    sens = value_sensitivities(run_dir, portfolio, info) if sensitivity_names(run_dir) else None
    return publish_valuation(portfolio, info, mc, rw, out, overwrite=overwrite, sensitivities=sens)
