"""The common shape of a check's result, and the family-wise verdict rule for its cells.

A check produces tables (written as CSV beside ``summary.json``) and one machine-readable entry
of ``summary.json["checks"]``. Every entry carries ``verdict`` (``"pass"``, ``"inconclusive"``,
``"fail"`` or ``"not_applicable"``), ``kind`` (what the check is about), ``rule`` (the tolerance in words),
``counts_toward_verdict`` (whether the run's overall verdict depends on it) and ``warnings``.
A check whose statistic is a set of z-scores also carries the cell summary of
:mod:`pqflow.validation.summary` (``cells``, ``outside_95``, ``max_abs_z``,
``family_critical_z``, ...): it passes when every cell lies within its Bonferroni-corrected
interval at family level 99%, whatever the correlation between the cells (Bonferroni's
inequality; common practice in multiple testing), and is inconclusive when it does not fail but
a cell lacks the power to see a material deviation (:mod:`pqflow.validation.summary`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import pandas as pd

from pqflow.storage import validation_summary as vs

__all__ = ["CheckResult", "VERDICTS", "cells_entry", "not_applicable_entry"]

VERDICTS = ("pass", "inconclusive", "fail", "not_applicable")


@dataclass(frozen=True, kw_only=True)
class CheckResult:
    """One check: its key in ``summary.json["checks"]``, that entry, and its tables
    (file stem -> table, written as ``validation/<stem>.csv``)."""

    name: str
    summary: dict[str, Any]
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)


def cells_entry(
    cells: pd.DataFrame,
    label_cols: list[str],
    *,
    kind: str,
    rule: str,
    counts_toward_verdict: bool = True,
    deviation: float | None = None,
) -> dict[str, Any]:
    """Summary entry of a check whose cells carry a ``z_score`` column (and, with
    ``deviation``, the power rule's ``material_effect`` and ``statistic_se``)."""
    from pqflow.validation.summary import cells_summary

    entry = cells_summary(cells.reset_index(drop=True), label_cols, deviation=deviation)
    if len(cells) == 0:
        entry[vs.VERDICT] = "not_applicable"
    entry.update({vs.KIND: kind, vs.RULE: rule, vs.COUNTS_TOWARD_VERDICT: counts_toward_verdict})
    entry.setdefault(vs.WARNINGS, [])
    return entry


def not_applicable_entry(*, kind: str, reason: str, counts_toward_verdict: bool = True) -> dict[str, Any]:
    """Entry of a check that cannot run on this run's files (it neither passes nor fails)."""
    entry = cells_entry(
        pd.DataFrame({"z_score": []}), [], kind=kind, rule=reason,
        counts_toward_verdict=counts_toward_verdict,
    )
    entry[vs.REASON] = reason
    return entry
