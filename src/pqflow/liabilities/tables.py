"""The valuation side by side: market-consistent, certainty-equivalent, TVOG, real world.

``results_frame`` has one row per line (model point, product, total) and quantity
(``best_estimate``, ``guarantee``). The real-world set is independent of the market-consistent
one (its own random streams), so the standard error of the difference of the two estimates is
``sqrt(se_mc^2 + se_rw^2)``; ``difference_in_se`` is the difference over it. With deflators the
two estimate one number, and ``|difference_in_se|`` beyond about 3 would say that something
(deflators, densities, the files) is wrong. The columns ``real_world_undeflated_*`` discount
the real-world cash flows with the cash account alone: not a valuation, shown so the reader sees
what the deflator's density does.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from pqflow import CAUTION
from pqflow.liabilities.portfolio import Portfolio
from pqflow.liabilities.valuation import QUANTITIES, RunInfo, SetValuation

__all__ = [
    "RECONCILIATION_LIMIT_SE",
    "results_frame",
    "cash_flow_frame",
    "valuation_summary",
    "valuation_table_rows",
    "CONVENTIONS",
]

RECONCILIATION_LIMIT_SE = 3.0

CONVENTIONS = (
    "Values are at the valuation date, in the portfolio currency, for all policies of each line; "
    "positive values are liabilities.",
    "best_estimate: every benefit (maturity, death, surrender, annuity value at retirement); "
    "guarantee: the guarantee's payoff alone (its cost). No premiums or expenses are projected.",
    "Cash flows fall on whole-year output times (policy anniversaries). On a sub-annual grid "
    "the times between anniversaries are not used: decrements, charges and crediting are "
    "annual, and exits are paid at the end of the policy year.",
    "Market-consistent discounting: deflator = 1 / cash account. Real world: deflator = "
    "q_density / cash account. Undeflated real-world columns drop the density (not a valuation).",
    "Certainty equivalent: the deterministic forward scenario from today's curve in "
    "calibration.json (rates at today's forwards, the equity index growing at the forward "
    "rate). TVOG = stochastic value - certainty-equivalent value.",
    "Standard errors are of the mean over independent sampling units (antithetic pairs "
    "averaged first when the set is antithetic).",
    "Bond prices at maturities the files do not carry: linear interpolation of log prices in "
    "maturity (constant forward between written maturities), flat forward beyond the longest "
    "for at most [valuation] bond_extrapolation_years.",
)


def _check_pair(mc: SetValuation, rw: SetValuation) -> None:
    if mc.measure != "market_consistent" or rw.measure != "real_world":
        raise ValueError("pass the market-consistent valuation first, then the real-world one")
    if [g.name for g in mc.groups] != [g.name for g in rw.groups]:
        raise ValueError("the two valuations are of different portfolios")


def _densities_of(rw: SetValuation, group) -> str:
    """The density columns the real-world deflators of a line's model points carry."""
    if not rw.densities:
        return "q_density"
    return ", ".join(dict.fromkeys(str(rw.densities[i]) for i in group.members))


def results_frame(mc: SetValuation, rw: SetValuation) -> pd.DataFrame:
    """One row per (line, quantity); see the module docstring for the columns."""
    _check_pair(mc, rw)
    rows = []
    for g, group in enumerate(mc.groups):
        for q, quantity in enumerate(QUANTITIES):
            v_mc, s_mc = float(mc.value[g, q]), float(mc.std_error[g, q])
            v_rw, s_rw = float(rw.value[g, q]), float(rw.std_error[g, q])
            ce = float(mc.certainty_equivalent[g, q])
            diff_se = float(np.hypot(s_mc, s_rw))
            row = {
                "level": group.level,
                "product": group.product,
                "name": group.name,
                "quantity": quantity,
                "policies": group.policies,
                "market_consistent_value": v_mc,
                "market_consistent_se": s_mc,
                "certainty_equivalent_value": ce,
                "tvog": v_mc - ce,
                "tvog_se": s_mc,
                "real_world_value": v_rw,
                "real_world_se": s_rw,
                "real_world_tvog": v_rw - ce,
                "difference": v_rw - v_mc,
                "difference_se": diff_se,
                "difference_in_se": (v_rw - v_mc) / diff_se if diff_se > 0 else 0.0,
            }
            for v, tag in ((mc, "market_consistent"), (rw, "real_world")):
                if v.plain_value is not None and v.plain_std_error is not None:
                    row[f"{tag}_value_without_controls"] = float(v.plain_value[g, q])
                    row[f"{tag}_se_without_controls"] = float(v.plain_std_error[g, q])
            row["real_world_density"] = _densities_of(rw, group)
            if rw.undeflated_value is not None and rw.undeflated_std_error is not None:
                u, su = float(rw.undeflated_value[g, q]), float(rw.undeflated_std_error[g, q])
                und_se = float(np.hypot(s_mc, su))
                row["real_world_undeflated_value"] = u
                row["real_world_undeflated_se"] = su
                row["undeflated_difference_in_se"] = (u - v_mc) / und_se if und_se > 0 else 0.0
            rows.append(row)
    return pd.DataFrame(rows)


def cash_flow_frame(mc: SetValuation, rw: SetValuation) -> pd.DataFrame:
    """Expected deflated cash flow by year, per product and in total, from each set and on the
    certainty-equivalent scenario: plain means, whose sums over the years are the values
    without control variates (``*_value_without_controls``)."""
    _check_pair(mc, rw)
    rows = []
    for k, g in enumerate(mc.profile_groups):
        group = mc.groups[g]
        for q, quantity in enumerate(QUANTITIES):
            for j, year in enumerate(mc.years):
                rows.append({
                    "level": group.level,
                    "name": group.name,
                    "quantity": quantity,
                    "year": float(year),
                    "market_consistent_pv": float(mc.profile[k, q, j]),
                    "real_world_pv": float(rw.profile[k, q, j]),
                    "certainty_equivalent_pv": float(mc.profile_ce[k, q, j]),
                })
    return pd.DataFrame(rows)


def _clean(value: Any) -> Any:
    if isinstance(value, (np.floating, float)):
        return float(value) if np.isfinite(value) else None
    if isinstance(value, np.integer):
        return int(value)
    return value


def valuation_summary(
    portfolio: Portfolio, info: RunInfo, mc: SetValuation, rw: SetValuation, results: pd.DataFrame
) -> dict[str, Any]:
    """A JSON-ready summary for the report and the command line (product and total lines)."""
    lines = results[results.level != "model_point"]
    rec = lines["difference_in_se"].abs()
    und = lines["undeflated_difference_in_se"].abs() if "undeflated_difference_in_se" in lines else None
    worst = lines.loc[rec.idxmax()] if len(lines) else None  # type: ignore[call-overload]  # pandas-stubs: .loc refuses idxmax's Hashable label
    return {
        "caution": CAUTION,
        "insurer": portfolio.insurer,
        "currency": portfolio.currency,
        "portfolio_file": portfolio.source,
        "model_points": len(portfolio.model_points),
        "run_dir": info.run_dir,
        "run_id": info.run_id,
        "valuation_date": info.valuation_date,
        "sets": {
            v.measure: {
                "scenarios": v.scenarios,
                "sampling_units": v.sampling_units,
                "antithetic": v.antithetic,
            }
            for v in (mc, rw)
        },
        "densities": {
            mp.id: d for mp, d in zip(portfolio.model_points, rw.densities or ("q_density",
                                                                               ) * len(portfolio.model_points),
                                                                               strict=True)
        },
        "control_variates": (
            "values and standard errors use control variates from known martingales (deflated "
            "certainty-equivalent cash flows, the same scaled by the index's performance, and in the "
            "real-world set the density), with coefficients cross-fitted on two halves of the "
            "sampling units (Glasserman 2003, section 4.1); the plain means are kept as "
            "*_without_controls"
        ),
        "lines": [{k: _clean(v) for k, v in row.items()} for row in lines.to_dict(orient="records")],
        "reconciliation": {
            "rule": (
                "market-consistent and deflated real-world values agree when every product and "
                f"total line differs by at most {RECONCILIATION_LIMIT_SE:g} standard errors"
            ),
            "limit_se": RECONCILIATION_LIMIT_SE,
            "max_abs_difference_in_se": float(rec.max()) if len(lines) else 0.0,
            "worst_line": None if worst is None else f"{worst['name']} / {worst['quantity']}",
            "verdict": "agree" if len(lines) == 0 or float(rec.max()) <= RECONCILIATION_LIMIT_SE else "differ",
            "undeflated_max_abs_difference_in_se": float(und.max()) if und is not None and len(und) else None,
        },
        "conventions": list(CONVENTIONS),
    }


def _money(x: float | None) -> str:
    return "-" if x is None else f"{x:,.0f}"


def valuation_table_rows(summary: dict[str, Any]) -> tuple[list[str], list[list[str]]]:
    """Headers and formatted rows (product and total lines) for a console or report table."""
    headers = [
        "line", "quantity", "market-consistent", "± SE", "certainty equiv.", "TVOG",
        "real-world deflated", "± SE", "difference / SE",
    ]
    rows = []
    for line in summary["lines"]:
        rows.append([
            line["name"],
            line["quantity"].replace("_", " "),
            _money(line["market_consistent_value"]),
            _money(line["market_consistent_se"]),
            _money(line["certainty_equivalent_value"]),
            _money(line["tvog"]),
            _money(line["real_world_value"]),
            _money(line["real_world_se"]),
            f"{line['difference_in_se']:+.2f}",
        ])
    return headers, rows
