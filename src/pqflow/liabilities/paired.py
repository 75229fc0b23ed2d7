"""Values per sampling unit, for differences between runs made with the same seeds.

Two runs with the same root seed, scenario count and grid draw the same normals (common random
numbers), so the value of a portfolio on run B minus its value on run A is estimated far more
precisely by the mean of the per-unit differences than the two standard errors suggest. Its
standard error is the sample standard deviation of those differences over the square root of
the number of units (antithetic pairs averaged first, as in :func:`value_run`). Used by the
step-wise attribution of ``pqflow compare --attribute``.

:func:`unit_values` projects exactly as :func:`pqflow.liabilities.valuation.value_run` does and
keeps each unit's present value; its mean is ``value_run``'s value (tested).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pqflow.liabilities.portfolio import Portfolio, load_portfolio
from pqflow.liabilities.scenarios import annual_scenarios
from pqflow.liabilities.valuation import (
    QUANTITIES,
    _discounted,
    _groups,
    _membership,
    check_portfolio_against_run,
    inspect_run,
    portfolio_reads,
)
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.validation.moments import sampling_units

__all__ = ["UnitValues", "unit_values", "paired_difference"]


@dataclass(frozen=True, kw_only=True)
class UnitValues:
    """``values[u, g, q]``: present value of line ``labels[g]`` (quantity ``QUANTITIES[q]``) on
    sampling unit ``u``, in the order the parts are written (so two runs pair unit by unit)."""

    labels: tuple[str, ...]
    levels: tuple[str, ...]
    values: np.ndarray

    def mean(self) -> np.ndarray:
        return self.values.mean(axis=0)


def unit_values(run_dir: str | Path, portfolio: Portfolio | str | Path,
                measure: str = "market_consistent") -> UnitValues:
    """Present value of every line on every sampling unit of one set."""
    if not isinstance(portfolio, Portfolio):
        portfolio = load_portfolio(portfolio)
    info = inspect_run(run_dir)
    equity_col = check_portfolio_against_run(portfolio, info)
    last = portfolio.max_term
    reads = portfolio_reads(portfolio, info, equity_col, with_cash=measure == "real_world")
    interp, bond_cols, columns = reads.interpolation, list(reads.bond_columns), list(reads.columns)
    groups = _groups(portfolio)
    member = _membership(groups, len(portfolio.model_points))
    reader = ScenarioSet(run_dir=Path(run_dir), measure=measure)
    chunks = []
    for times, cols in reader.iter_arrays(columns):
        scen = annual_scenarios(times, cols, last_year=last, equity_column=equity_col,
                                bond_columns=bond_cols, interpolation=interp)
        flows = _discounted(portfolio, scen, scen.deflator)
        by_group = np.einsum("gm,nmqt->ngqt", member, flows).sum(axis=-1).reshape(scen.n_paths, -1)
        chunks.append(sampling_units(by_group, reader.antithetic))
    values = np.concatenate(chunks, axis=0).reshape(-1, len(groups), len(QUANTITIES))
    return UnitValues(labels=tuple(g.name for g in groups), levels=tuple(g.level for g in groups), values=values)


def paired_difference(a: UnitValues, b: UnitValues) -> tuple[np.ndarray, np.ndarray, bool]:
    """Mean of ``b - a`` and its standard error, ``(n_groups, 2)`` each, and whether the units
    could be paired (same count and lines); unpaired runs get ``sqrt(se_a^2 + se_b^2)``."""
    diff_mean = b.mean() - a.mean()
    if a.values.shape == b.values.shape and a.labels == b.labels:
        d = b.values - a.values
        n = d.shape[0]
        se = d.std(axis=0, ddof=1) / np.sqrt(n) if n > 1 else np.zeros_like(diff_mean)
        return diff_mean, se, True
    def se_of(u: UnitValues) -> np.ndarray:
        n = u.values.shape[0]
        return u.values.std(axis=0, ddof=1) / np.sqrt(n) if n > 1 else np.zeros(u.values.shape[1:])
    return diff_mean, np.sqrt(se_of(a) ** 2 + se_of(b) ** 2), False
