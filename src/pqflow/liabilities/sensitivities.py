"""The portfolio valued on every sensitivity set of a run, and the change from the base.

Each sensitivity's market-consistent set was simulated with the base run's seeds (common random
numbers): part ``k`` of both holds the same scenarios driven by the same normals. So the
projection runs on the two sets in lockstep, and for every sampling unit ``i`` (a path, or an
antithetic pair averaged) the change ``d_i = v_i(sensitivity) - v_i(base)`` is formed; the
change of a value is the mean of ``d_i`` and its standard error ``sd(d) / sqrt(n)`` (paired).
Beside it, the standard error the same change would have between independently seeded sets,
``sqrt(SE_base^2 + SE_sensitivity^2)``: the variance of a difference of independent means.
The paired one is smaller by the correlation the common random numbers create,
``Var(d) = Var(v_s) + Var(v_b) - 2 Cov(v_s, v_b)`` (Glasserman, *Monte Carlo Methods in
Financial Engineering*, 2003, s. 4.2).

Quantities per product line and in total: ``best_estimate``, ``guarantee`` (their stochastic
values) and ``tvog`` (stochastic minus certainty-equivalent value; the certainty-equivalent
value is deterministic, on the sensitivity's own curve and equity level, so the TVOG change has
the standard error of the stochastic value's change).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from pqflow.errors import RunDirectoryError
from pqflow.liabilities.portfolio import Portfolio
from pqflow.liabilities.products import project_model_point
from pqflow.liabilities.scenarios import BondInterpolation, annual_scenarios, certainty_equivalent_scenario
from pqflow.liabilities.valuation import QUANTITIES, RunInfo, check_portfolio_against_run, portfolio_reads
from pqflow.market.serialize import curve_from_json
from pqflow.storage.calibration_file import calibration_path, read_calibration_file
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.storage.sensitivity_index import read_sensitivity_index
from pqflow.validation.moments import Moments, sampling_units

__all__ = ["SENSITIVITY_COLUMNS", "sensitivity_names", "value_sensitivities", "sensitivity_summary"]

MEASURE = "market_consistent"
SENSITIVITY_COLUMNS = (
    "sensitivity", "level", "line", "quantity", "base_value", "value", "change", "change_se_paired",
    "change_se_independent", "se_ratio", "base_se", "value_se", "scenarios",
)


def sensitivity_names(run_dir: str | Path) -> list[str]:
    """The sensitivity sets of a run, from ``sensitivities/index.json`` (none: empty)."""
    index = read_sensitivity_index(run_dir)
    return [] if index is None else index.names


@dataclass(frozen=True)
class _Lines:
    names: tuple[tuple[str, str], ...]  # (level, line)
    member: np.ndarray  # (n_lines, n_model_points)


def _lines(portfolio: Portfolio) -> _Lines:
    mps = portfolio.model_points
    names, rows = [], []
    for p in portfolio.products:
        names.append(("product", p))
        rows.append([1.0 if mp.product == p else 0.0 for mp in mps])
    names.append(("total", "total"))
    rows.append([1.0] * len(mps))
    return _Lines(names=tuple(names), member=np.array(rows))


def _path_values(portfolio: Portfolio, lines: _Lines, scen) -> np.ndarray:
    """Deflated value of every line and quantity per path, ``(n_paths, n_lines * 2)``."""
    flows = [project_model_point(mp, scen) for mp in portfolio.model_points]
    arr = np.stack([np.stack(f, axis=1) for f in flows], axis=1)  # (n, n_mp, 2, J+1)
    disc = (arr * scen.deflator[:, None, None, :]).sum(axis=-1)  # (n, n_mp, 2)
    return np.einsum("lm,nmq->nlq", lines.member, disc).reshape(scen.n_paths, -1)


def _ce_values(portfolio: Portfolio, lines: _Lines, run_dir: Path, last: int, interp: BondInterpolation,
               equity_col: str | None = None) -> np.ndarray:
    cal = read_calibration_file(calibration_path(run_dir))
    levels = {i.column: i.level for i in cal.indices}  # the core index first
    level = levels[equity_col] if equity_col in levels else next(iter(levels.values()))
    scen = certainty_equivalent_scenario(
        curve_from_json(cal.curve), last_year=last, interpolation=interp, equity_level=level
    )
    return _path_values(portfolio, lines, scen)[0]


def value_sensitivities(run_dir: str | Path, portfolio: Portfolio, info: RunInfo) -> pd.DataFrame:
    """One row per (sensitivity, line, quantity): columns :data:`SENSITIVITY_COLUMNS`.

    ``info`` is the base run's (:func:`pqflow.liabilities.valuation.inspect_run`); the
    portfolio is checked against it. Raises ``RunDirectoryError`` when a sensitivity set does
    not pair with the base set (other parts, times or scenario numbers).
    """
    run_dir = Path(run_dir)
    names = sensitivity_names(run_dir)
    equity_col = check_portfolio_against_run(portfolio, info)
    last = portfolio.max_term
    reads = portfolio_reads(portfolio, info, equity_col)
    interp, bond_cols, columns = reads.interpolation, list(reads.bond_columns), list(reads.columns)
    lines = _lines(portfolio)
    ce_base = _ce_values(portfolio, lines, run_dir, last, interp, equity_col)
    base_reader = ScenarioSet(run_dir=run_dir, measure=MEASURE)
    antithetic = base_reader.antithetic
    rows: list[dict[str, Any]] = []
    for name in names:
        sens_dir = run_dir / "sensitivities" / name
        reader = ScenarioSet(run_dir=sens_dir, measure=MEASURE)
        if reader.antithetic != antithetic or len(reader.parts()) != len(base_reader.parts()):
            raise RunDirectoryError(f"{sens_dir}: its market-consistent set does not pair with the base set's parts")
        acc: Moments | None = None
        n_paths = 0
        for (t_b, c_b), (t_s, c_s) in zip(base_reader.iter_arrays(columns), reader.iter_arrays(columns), strict=True):
            if not np.array_equal(t_b, t_s):
                raise RunDirectoryError(f"{sens_dir}: output times differ from the base set's")
            vals = []
            for times, cols in ((t_b, c_b), (t_s, c_s)):
                scen = annual_scenarios(times, cols, last_year=last, equity_column=equity_col,
                                        bond_columns=bond_cols, interpolation=interp)
                vals.append(_path_values(portfolio, lines, scen))
            if vals[0].shape != vals[1].shape:
                raise RunDirectoryError(f"{sens_dir}: a part holds another number of scenarios than the base set's")
            n_paths += vals[0].shape[0]
            stacked = np.concatenate([vals[0], vals[1], vals[1] - vals[0]], axis=1)
            m = Moments.of(sampling_units(stacked, antithetic))
            acc = m if acc is None else acc.merge(m)
        if acc is None:
            raise RunDirectoryError(f"{sens_dir}: no scenario parts to value")
        k = len(lines.names) * len(QUANTITIES)
        mean, se = acc.mean, acc.std_error
        ce_s = _ce_values(portfolio, lines, sens_dir, last, interp, equity_col)
        for j, (level, line) in enumerate(lines.names):
            for q, quantity in enumerate(QUANTITIES):
                i = j * len(QUANTITIES) + q
                entries = [(quantity, 0.0, 0.0)]
                if quantity == "best_estimate":
                    entries.append(("tvog", ce_base[i], ce_s[i]))
                for label, ce_b, ce_v in entries:
                    base_value, value = mean[i] - ce_b, mean[k + i] - ce_v
                    base_se, value_se, paired = se[i], se[k + i], se[2 * k + i]
                    independent = float(np.hypot(base_se, value_se))
                    rows.append({
                        "sensitivity": name, "level": level, "line": line, "quantity": label,
                        "base_value": float(base_value), "value": float(value),
                        "change": float(mean[2 * k + i] - (ce_v - ce_b)),
                        "change_se_paired": float(paired), "change_se_independent": independent,
                        "se_ratio": float(paired / independent) if independent > 0 else float("nan"),
                        "base_se": float(base_se), "value_se": float(value_se), "scenarios": n_paths,
                    })
    return pd.DataFrame(rows, columns=list(SENSITIVITY_COLUMNS))


def sensitivity_summary(table: pd.DataFrame) -> list[dict[str, Any]]:
    """The ``sensitivities`` entry of the valuation's ``summary.json``: the total line's best
    estimate, guarantee and TVOG per sensitivity, with both standard errors of each change."""
    out: list[dict[str, Any]] = []
    total = table[table["level"] == "total"]
    for name, rows in total.groupby("sensitivity", sort=False):
        entry: dict[str, Any] = {"sensitivity": name, "scenarios": int(rows["scenarios"].iloc[0])}
        for r in rows.itertuples(index=False):
            entry[str(r.quantity)] = {
                "base": r.base_value, "value": r.value, "change": r.change,
                "change_se_paired": r.change_se_paired, "change_se_independent": r.change_se_independent,
            }
        out.append(entry)
    return out
