"""Prefect artifacts of a run's validation: a markdown summary and tables of the verdicts.

Artifacts are for people reading the run in Prefect's UI; the files in the run directory stay
the record. The builders (:func:`verdict_markdown`, :func:`verdict_table`,
:func:`instrument_table`, :func:`reconciliation_table`) are plain functions of
``validation/summary.json``'s content; :func:`publish_artifacts` creates the artifacts and must
run inside a flow or task. Artifact keys, and the tables' column names, use only lowercase
letters, digits and dashes (Prefect's rule for artifact keys, kept for the columns too).
"""

from __future__ import annotations

import math
import re
from typing import Any

from pqflow import CAUTION
from pqflow.storage.validation_summary import check_counts_toward_verdict, validation_summary_from_json

__all__ = [
    "publish_artifacts",
    "verdict_markdown",
    "verdict_table",
    "instrument_table",
    "reconciliation_table",
    "ARTIFACT_KEYS",
    "slug",
]

ARTIFACT_KEYS = {
    "summary": "pqflow-validation-summary",
    "verdicts": "pqflow-verdicts",
    "instruments": "pqflow-market-consistency",
    "reconciliation": "pqflow-reconciliation",
}
_SLUG = re.compile(r"[^a-z0-9]+")


def slug(text: str) -> str:
    """``"Max |z|"`` -> ``"max-z"``: lowercase letters, digits and single dashes."""
    return _SLUG.sub("-", text.lower()).strip("-") or "x"


def _num(v: Any, digits: int = 4) -> Any:
    if isinstance(v, bool) or v is None:
        return v
    if isinstance(v, (int, float)):
        return round(float(v), digits) if math.isfinite(float(v)) else None
    return v


def verdict_table(summary: dict[str, Any]) -> list[dict[str, Any]]:
    """One row per check (and the nested wealth-ratio benchmark)."""
    rows = []
    for name, c in validation_summary_from_json(summary).checks.items():
        rows.append({
            "check": slug(name),
            "verdict": c.verdict,
            "counts-toward-verdict": c.counts_toward_verdict,
            "cells": c.cells,
            "max-abs-z": _num(c.max_abs_z),
            "limit": _num(c.family_critical_z),
            "warnings": len(c.warnings),
        })
        bench = c.wealth_ratio_benchmark
        if isinstance(bench, dict):
            rows.append({
                "check": f"{slug(name)}-wealth-ratio-benchmark",
                "verdict": bench.get("verdict"),
                "counts-toward-verdict": check_counts_toward_verdict(bench, default=False),
                "cells": bench.get("comparisons"),
                "max-abs-z": None,
                "limit": None,
                "warnings": len(bench.get("warnings") or []),
            })
    return rows


def instrument_table(summary: dict[str, Any]) -> list[dict[str, Any]]:
    """Market-consistency rows: each instrument in each set."""
    c = validation_summary_from_json(summary).check_entry("market_consistency") or {}
    return [
        {
            "instrument": r.get("instrument"),
            "measure": slug(str(r.get("measure"))),
            "mc-price": _num(r.get("mc_price"), 8),
            "std-error": _num(r.get("std_error"), 8),
            "market-price": _num(r.get("market_price"), 8),
            "vol-difference-bp": _num(r.get("vol_difference_bp"), 2),
            "z-beyond-tolerance": _num(r.get("z_score"), 3),
        }
        for r in c.get("rows", []) or []
    ]


def reconciliation_table(summary: dict[str, Any]) -> list[dict[str, Any]]:
    """The guarantee's three values with their standard errors."""
    c = validation_summary_from_json(summary).check_entry("reconciliation") or {}
    v = c.get("values") or {}
    if not v:
        return []
    return [
        {"method": "closed-form", "value": _num(v.get("closed_form"), 6), "std-error": 0.0},
        {"method": "market-consistent-set", "value": _num(v.get("market_consistent"), 6),
         "std-error": _num(v.get("market_consistent_se"), 6)},
        {"method": "real-world-set-with-deflators", "value": _num(v.get("real_world"), 6),
         "std-error": _num(v.get("real_world_se"), 6)},
    ]


def verdict_markdown(summary: dict[str, Any], report_path: str | None) -> str:
    """The markdown artifact: overall verdict, a line per check, warnings, the caution."""
    lines = [f"# pqflow validation: **{str(summary.get('verdict', '?')).upper()}**", ""]
    lines.append(f"_{summary.get('rule', '')}_")
    lines += ["", "| check | verdict | cells | max abs z / limit |", "|---|---|---:|---:|"]
    for row in verdict_table(summary):
        mark = "" if row["counts-toward-verdict"] else " (reported)"
        z = "" if row["max-abs-z"] is None else f"{row['max-abs-z']:.2f} / {row['limit']:.2f}"
        lines.append(f"| {row['check']} | {str(row['verdict']).upper()}{mark} | {row['cells']} | {z} |")
    warnings = [w for c in (summary.get("checks") or {}).values() for w in (c.get("warnings") or [])]
    if warnings:
        lines += ["", "**Warnings**", ""] + [f"- {w}" for w in warnings]
    if report_path:
        lines += ["", f"Report: `{report_path}`"]
    lines += ["", f"> {CAUTION}"]
    return "\n".join(lines) + "\n"


def publish_artifacts(summary: dict[str, Any], report_path: str | None) -> dict[str, str]:
    """Create the markdown and table artifacts in the current flow run; returns key -> id."""
    from prefect.artifacts import create_markdown_artifact, create_table_artifact

    ids = {
        ARTIFACT_KEYS["summary"]: create_markdown_artifact(
            markdown=verdict_markdown(summary, report_path), key=ARTIFACT_KEYS["summary"],
            description="Verdicts of the checks computed from the run's files",
        ),
        ARTIFACT_KEYS["verdicts"]: create_table_artifact(
            table=verdict_table(summary), key=ARTIFACT_KEYS["verdicts"], description="Verdict per check",
        ),
    }
    instruments = instrument_table(summary)
    if instruments:
        ids[ARTIFACT_KEYS["instruments"]] = create_table_artifact(
            table=instruments, key=ARTIFACT_KEYS["instruments"],
            description="Calibration instruments repriced from the files",
        )
    recon = reconciliation_table(summary)
    if recon:
        ids[ARTIFACT_KEYS["reconciliation"]] = create_table_artifact(
            table=recon, key=ARTIFACT_KEYS["reconciliation"],
            description="Maturity guarantee valued three ways",
        )
    return {k: str(v) for k, v in ids.items()}
