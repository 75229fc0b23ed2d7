"""Liabilities with guarantees: best estimate, certainty-equivalent value and TVOG from a
run's scenario files, with the real-world (deflated) values beside the market-consistent ones.

    portfolio.py    the portfolio file (TOML): decrement bases and model points, validated
    decrements.py   deaths (Gompertz-Makeham) and lapses per policy year
    scenarios.py    whole-year scenario values, bond interpolation, the forward scenario
    products.py     cash flows of each product on a batch of scenarios
    valuation.py    value_run: one set, part by part, with standard errors
    tables.py       results side by side, cash-flow profile, summary, rows for a table
    job.py          the job as plain functions (the CLI and the Prefect flow call these)
"""

from __future__ import annotations

from pqflow.liabilities.job import publish_valuation, value_liabilities_cli
from pqflow.liabilities.portfolio import (
    PRODUCTS,
    DeferredAnnuityGAO,
    GompertzMakeham,
    LiabilityDataError,
    Participating,
    Portfolio,
    UnitLinkedGMMB,
    load_portfolio,
    parse_portfolio,
)
from pqflow.liabilities.tables import cash_flow_frame, results_frame, valuation_summary, valuation_table_rows
from pqflow.liabilities.valuation import (
    QUANTITIES,
    RunInfo,
    SetValuation,
    check_portfolio_against_run,
    inspect_run,
    value_run,
)

__all__ = [
    "PRODUCTS",
    "QUANTITIES",
    "DeferredAnnuityGAO",
    "GompertzMakeham",
    "LiabilityDataError",
    "Participating",
    "Portfolio",
    "RunInfo",
    "SetValuation",
    "UnitLinkedGMMB",
    "cash_flow_frame",
    "check_portfolio_against_run",
    "inspect_run",
    "load_portfolio",
    "parse_portfolio",
    "publish_valuation",
    "results_frame",
    "value_liabilities_cli",
    "value_run",
    "valuation_summary",
    "valuation_table_rows",
]
