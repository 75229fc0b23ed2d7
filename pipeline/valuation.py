"""The valuation flow: read the portfolio -> value it on both scenario sets -> publish.

The two sets are valued by separate tasks (they read different files and share nothing), so a
thread pool runs them side by side. Tasks pass the small portfolio and result records, never
scenario arrays: each ``value_run`` reads its set part by part from disk.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from prefect import flow, task
from prefect.cache_policies import NO_CACHE
from prefect.task_runners import ThreadPoolTaskRunner

from pqflow.liabilities.job import default_out_dir, publish_valuation
from pqflow.liabilities.portfolio import Portfolio, load_portfolio
from pqflow.liabilities.sensitivities import sensitivity_names, value_sensitivities
from pqflow.liabilities.valuation import (
    RunInfo,
    SetValuation,
    check_portfolio_against_run,
    inspect_run,
    value_run,
)
from pqflow.storage.valuation_files import check_valuation_target

__all__ = ["value_liabilities"]


@task(name="load-portfolio", cache_policy=NO_CACHE)
def load_portfolio_task(run_dir: str, liabilities_path: str) -> tuple[Portfolio, RunInfo]:
    portfolio = load_portfolio(liabilities_path)
    info = inspect_run(run_dir)
    check_portfolio_against_run(portfolio, info)  # every row error surfaces before valuing
    return portfolio, info


@task(name="value-set", cache_policy=NO_CACHE)
def value_set_task(run_dir: str, portfolio: Portfolio, measure: str) -> SetValuation:
    return value_run(run_dir, portfolio, measure)


@task(name="value-sensitivities", cache_policy=NO_CACHE)
def value_sensitivities_task(run_dir: str, portfolio: Portfolio, info: RunInfo) -> Any:
    return value_sensitivities(run_dir, portfolio, info)


@task(name="publish-valuation", cache_policy=NO_CACHE)
def publish_task(
    portfolio: Portfolio, info: RunInfo, mc: SetValuation, rw: SetValuation, out_dir: str, overwrite: bool = False,
    sensitivities: Any = None,
) -> dict[str, Any]:
    return publish_valuation(portfolio, info, mc, rw, out_dir, overwrite=overwrite, sensitivities=sensitivities)


@flow(name="value_liabilities", log_prints=False, task_runner=ThreadPoolTaskRunner(max_workers=2))  # type: ignore[arg-type]  # prefect: a fresh ThreadPoolTaskRunner types as [Never]
def value_liabilities(
    run_dir: str, liabilities_path: str, out_dir: str | None = None, overwrite: bool = False
) -> dict[str, Any]:
    """Best estimate, certainty-equivalent value and TVOG of the portfolio in
    ``liabilities_path`` on both sets of ``run_dir``; results to ``out_dir`` (default
    ``run_dir/valuation``; earlier results there are replaced only with ``overwrite``).
    Returns the summary dict."""
    run_dir = str(run_dir)
    target = str(out_dir) if out_dir is not None else str(default_out_dir(run_dir))
    check_valuation_target(target, overwrite)  # refused before anything is valued
    portfolio, info = load_portfolio_task(run_dir, str(liabilities_path))
    mc = value_set_task.submit(run_dir, portfolio, "market_consistent")
    rw = value_set_task.submit(run_dir, portfolio, "real_world")
    sens = value_sensitivities_task.submit(run_dir, portfolio, info) if sensitivity_names(run_dir) else None
    table = sens.result() if sens is not None else None  # errors surface before anything is written
    return publish_task(portfolio, info, mc.result(), rw.result(), str(Path(target)), overwrite, table)
