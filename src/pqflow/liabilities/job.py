"""The valuation job as plain functions: what ``pqflow value`` and the Prefect flow call.

    portfolio = load_portfolio(path)                     read and validate the file
    mc = value_run(run_dir, portfolio, "market_consistent")
    rw = value_run(run_dir, portfolio, "real_world")     independent of mc: may run in parallel
    summary = publish_valuation(portfolio, info, mc, rw, out_dir)   tables + summary.json

``value_liabilities_cli`` does all of it in one call.
"""

from __future__ import annotations

import shutil

from pathlib import Path
from typing import Any

from pqflow import __version__
from pqflow.liabilities.portfolio import Portfolio, load_portfolio
from pqflow.liabilities.sensitivities import sensitivity_names, sensitivity_summary, value_sensitivities
from pqflow.liabilities.tables import cash_flow_frame, results_frame, valuation_summary, valuation_table_rows
from pqflow.liabilities.valuation import RunInfo, SetValuation, check_portfolio_against_run, inspect_run, value_run
from pqflow.storage.jsonio import write_json_atomic
from pqflow.storage.parquet import file_sha256
from pqflow.storage.results import write_result_tables

__all__ = [
    "VALUATION_DIR",
    "RESULT_TABLES",
    "default_out_dir",
    "publish_valuation",
    "publish_sensitivities",
    "value_liabilities_cli",
    "valuation_table_rows",
]

VALUATION_DIR = "valuation"
RESULT_TABLES = ("liability_values", "liability_cash_flows")


def default_out_dir(run_dir: str | Path) -> Path:
    """``run_dir/valuation``: beside the run's files, outside its manifest (which it leaves as is)."""
    return Path(run_dir) / VALUATION_DIR


def publish_valuation(
    portfolio: Portfolio, info: RunInfo, mc: SetValuation, rw: SetValuation, out_dir: str | Path
) -> dict[str, Any]:
    """Write ``liability_values`` and ``liability_cash_flows`` (Parquet and CSV) and
    ``summary.json`` to ``out_dir``; return the summary (with the files written)."""
    results = results_frame(mc, rw)
    summary = valuation_summary(portfolio, info, mc, rw, results)
    source = Path(portfolio.source)
    summary["portfolio_sha256"] = file_sha256(source) if source.is_file() else None
    summary["pqflow_version"] = __version__
    metadata = {
        "pqflow.version": __version__,
        "pqflow.insurer": portfolio.insurer,
        "pqflow.currency": portfolio.currency,
        "pqflow.valuation_date": info.valuation_date,
        "pqflow.run_id": info.run_id or "",
        "pqflow.caution": summary["caution"],
    }
    files = write_result_tables(
        out_dir,
        {"liability_values": results, "liability_cash_flows": cash_flow_frame(mc, rw)},
        metadata=metadata,
    )
    files["summary.json"] = str(Path(out_dir) / "summary.json")
    summary["files"] = files
    write_json_atomic(Path(out_dir) / "summary.json", summary)
    return summary


def value_liabilities_cli(
    run_dir: str | Path, liabilities_path: str | Path, out_dir: str | Path | None = None
) -> dict[str, Any]:
    """Value the portfolio in ``liabilities_path`` on both sets of the run in ``run_dir``.

    Writes to ``out_dir`` (default ``run_dir/valuation``) and returns the summary dict (see
    :func:`pqflow.liabilities.tables.valuation_summary`; ``summary["files"]`` lists the files).
    Raises ``LiabilityDataError`` (a ``PqflowError``) on a bad portfolio, before any file is
    written.
    """
    portfolio = load_portfolio(liabilities_path)
    info = inspect_run(run_dir)
    check_portfolio_against_run(portfolio, info)
    mc = value_run(run_dir, portfolio, "market_consistent")
    rw = value_run(run_dir, portfolio, "real_world")
    sens = value_sensitivities(run_dir, portfolio, info) if sensitivity_names(run_dir) else None
    target = Path(out_dir) if out_dir is not None else default_out_dir(run_dir)
    existed = target.exists()
    try:
        summary = publish_valuation(portfolio, info, mc, rw, target)
        return publish_sensitivities(sens, summary, target) if sens is not None else summary
    except BaseException:  # disk full, interrupted: a folder this call created is not left half-written
        if not existed:
            shutil.rmtree(target, ignore_errors=True)
        raise


def publish_sensitivities(table: Any, summary: dict[str, Any], out_dir: str | Path) -> dict[str, Any]:
    """Write ``sensitivities`` (Parquet and CSV: BE, guarantee and TVOG per sensitivity and line,
    the change from the base and its paired and independent-sets standard errors) beside the
    valuation, and add the totals to its ``summary.json``; return the summary."""
    files = write_result_tables(out_dir, {"sensitivities": table}, metadata={"pqflow.version": __version__})
    summary = dict(summary)
    summary["sensitivities"] = sensitivity_summary(table)
    summary["sensitivities_note"] = (
        "change = sensitivity - base on the same scenarios (common random numbers); change_se_paired from the "
        "paired differences, change_se_independent = sqrt(SE_base^2 + SE_sensitivity^2), what independently "
        "seeded sets would give"
    )
    summary["files"] = {**summary.get("files", {}), **files}
    write_json_atomic(Path(out_dir) / "summary.json", summary)
    return summary
