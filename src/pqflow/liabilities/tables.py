"""The valuation side by side: market-consistent, certainty-equivalent, TVOG, real world.

``results_frame`` has one row per line (model point, product, total) and quantity
(``best_estimate``, ``guarantee``). The real-world set is independent of the market-consistent
one (its own random streams), so the standard error of the difference of the two estimates is
``sqrt(se_mc^2 + se_rw^2)``; ``difference_in_se`` is the difference over it. With deflators the
two estimate one number. The verdict (:func:`reconciliation_verdict`) has three states, as the
checks of the scenario files do: a product or total line *differs* when ``|difference_in_se|``
exceeds the Bonferroni critical value at family level 99% over the lines
(:func:`pqflow.validation.summary.family_critical_z`); a line that does not differ is
*inconclusive* when its comparison could not see a material difference, 2% of the line's
market-consistent value (:data:`MATERIAL_SHARE`, the same share as the guarantee
reconciliation; common practice), with at least 50% power at that level (``0.02 |V| / se <
z_f``); the valuation *agrees* only when every line is judged and none differs. With a few
thousand scenarios the guarantee lines are normally inconclusive: their values are small
against the standard error. Size and power are measured in
``tests/test_liabilities_reconciliation.py``. The columns ``real_world_undeflated_*`` discount
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
from pqflow.storage.names import density_column
from pqflow.validation.reconciliation import MATERIAL_SHARE as RECONCILIATION_MATERIAL_SHARE
from pqflow.validation.summary import FAMILY_ALPHA, family_critical_z

__all__ = [
    "MATERIAL_SHARE",
    "reconciliation_verdict",
    "results_frame",
    "cash_flow_frame",
    "valuation_summary",
    "valuation_table_rows",
    "CONVENTIONS",
]

#: material difference between the two sets' values of a line: 2% of its market-consistent value
MATERIAL_SHARE = RECONCILIATION_MATERIAL_SHARE

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
        return density_column("real_world")
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


def reconciliation_verdict(
    names: list[str], market_consistent: np.ndarray, difference_in_se: np.ndarray, difference_se: np.ndarray
) -> dict[str, Any]:
    """The three-state verdict over the product and total lines (module docstring): ``agree``,
    ``inconclusive`` or ``differ``, with the family critical value, the largest difference and
    the lines that could not be judged."""
    z = np.abs(np.asarray(difference_in_se, dtype=float))
    se = np.asarray(difference_se, dtype=float)
    material = MATERIAL_SHARE * np.abs(np.asarray(market_consistent, dtype=float))
    crit = family_critical_z(len(z))
    differ = z > crit
    with np.errstate(divide="ignore", invalid="ignore"):
        weak = ~differ & ~(material / se >= crit)
    verdict = "differ" if differ.any() else "inconclusive" if weak.any() else "agree"
    worst = int(np.argmax(z)) if len(z) else None
    return {
        "rule": (
            "a product or total line differs when |real world - market consistent| exceeds "
            f"z = {crit:.2f} standard errors of the difference (Bonferroni, family level "
            f"{1 - FAMILY_ALPHA:.0%} over {len(z)} lines); a line that does not differ is inconclusive when "
            f"the comparison would detect a difference of {MATERIAL_SHARE:.0%} of its market-consistent "
            "value less than half the time at that level; the valuation agrees when every line is judged "
            "and none differs"
        ),
        "family_critical_z": crit,
        "material_share": MATERIAL_SHARE,
        "max_abs_difference_in_se": float(z.max()) if len(z) else 0.0,
        "worst_line": None if worst is None else names[worst],
        "differing_lines": [names[i] for i in np.flatnonzero(differ)],
        "inconclusive_lines": [names[i] for i in np.flatnonzero(weak)],
        "verdict": verdict,
    }


def valuation_summary(
    portfolio: Portfolio, info: RunInfo, mc: SetValuation, rw: SetValuation, results: pd.DataFrame
) -> dict[str, Any]:
    """A JSON-ready summary for the report and the command line (product and total lines)."""
    lines = results[results.level != "model_point"]
    und = lines["undeflated_difference_in_se"].abs() if "undeflated_difference_in_se" in lines else None
    reconciliation = reconciliation_verdict(
        [f"{n} / {q}" for n, q in zip(lines["name"], lines["quantity"], strict=True)],
        lines["market_consistent_value"].to_numpy(), lines["difference_in_se"].to_numpy(),
        lines["difference_se"].to_numpy())
    reconciliation["undeflated_max_abs_difference_in_se"] = (
        float(und.max()) if und is not None and len(und) else None)
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
            mp.id: d for mp, d in zip(
                portfolio.model_points,
                rw.densities or (density_column("real_world"),) * len(portfolio.model_points),
                strict=True,
            )
        },
        "control_variates": (
            "values and standard errors use control variates from known martingales (deflated "
            "certainty-equivalent cash flows, the same scaled by the index's performance, and in the "
            "real-world set the density), with coefficients cross-fitted on two halves of the "
            "sampling units (Glasserman 2003, section 4.1); the plain means are kept as "
            "*_without_controls"
        ),
        "lines": [{k: _clean(v) for k, v in row.items()} for row in lines.to_dict(orient="records")],
        "reconciliation": reconciliation,
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
