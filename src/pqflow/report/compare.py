"""What moved between two runs (last quarter's and this quarter's, or two seeds of one).

Read from each run's ``calibration.json``, ``validation/summary.json`` and (when present)
``manifest.json``; nothing is recomputed. Four sections:

* ``inputs``: every calibration input that differs (market-data file checksums included);
* ``parameters``: calibrated parameters that differ, with today's curve shown as zero rates at
  standard maturities and long schedules (prices of risk by month) summarised;
* ``checks``: each check's verdict and key numbers side by side (all checks, changed or not);
* ``reconciliation``: the guarantee's three values side by side.

:func:`render_compare_text` gives plain rows for a terminal table; :func:`write_compare_html`
writes a self-contained page (a derived view, written atomically).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from html import escape
from pathlib import Path
from typing import Any

import numpy as np

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json

__all__ = [
    "Change",
    "Comparison",
    "compare_runs",
    "render_compare_text",
    "write_compare_html",
    "COMPARE_COLUMNS",
]

COMPARE_COLUMNS = ("section", "item", "run A", "run B", "change")
_ZERO_MATURITIES = (1.0, 2.0, 5.0, 10.0, 20.0, 30.0, 50.0)
_LONG_SCHEDULE = 12


@dataclass(frozen=True, kw_only=True)
class Change:
    """One compared item: ``before`` (run A) and ``after`` (run B); ``difference`` is
    ``after - before`` when both are numbers; ``changed`` whether they differ."""

    section: str
    item: str
    before: Any
    after: Any
    difference: float | None
    changed: bool


@dataclass(frozen=True, kw_only=True)
class Comparison:
    """What moved between ``run_a`` and ``run_b`` (paths as given)."""

    run_a: str
    run_b: str
    identity: tuple[Change, ...]
    inputs: tuple[Change, ...]
    parameters: tuple[Change, ...]
    checks: tuple[Change, ...]
    reconciliation: tuple[Change, ...]
    unchanged_inputs: int
    unchanged_parameters: int

    def sections(self) -> dict[str, tuple[Change, ...]]:
        return {"identity": self.identity, "inputs": self.inputs, "parameters": self.parameters,
                "checks": self.checks, "reconciliation": self.reconciliation}


def _per_set_text(value: Any) -> Any:
    if isinstance(value, dict):
        return ", ".join(f"{m}: {v}" for m, v in value.items())
    return value


def _is_num(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(float(v))


def _change(section: str, item: str, a: Any, b: Any) -> Change:
    diff = float(b) - float(a) if _is_num(a) and _is_num(b) else None
    if diff is not None:
        changed = abs(diff) > 1e-12 * max(abs(float(a)), abs(float(b)), 1e-300)
    else:
        changed = a != b
    return Change(section=section, item=item, before=a, after=b, difference=diff, changed=changed)


def _summarise_schedule(v: dict[str, Any]) -> dict[str, Any]:
    vals = [float(x) for x in v.get("values", [])]
    if len(vals) <= _LONG_SCHEDULE:
        return {f"from {float(k):g}y": x for k, x in zip(v.get("knots", []), vals)}
    return {"pieces": len(vals), "first": vals[0], "last": vals[-1], "min": min(vals), "max": max(vals)}


def _flatten(obj: Any, prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    if isinstance(obj, dict):
        if set(obj) >= {"knots", "values"}:
            obj = _summarise_schedule(obj)
        for k, v in obj.items():
            out.update(_flatten(v, f"{prefix}.{k}" if prefix else str(k)))
    elif isinstance(obj, list) and any(isinstance(v, (dict, list)) for v in obj):
        for i, v in enumerate(obj):
            out.update(_flatten(v, f"{prefix}[{i}]"))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            out[f"{prefix}[{i}]"] = v
    else:
        out[prefix] = obj
    return out


def _diff(section: str, a: dict[str, Any], b: dict[str, Any]) -> tuple[list[Change], int]:
    changes, same = [], 0
    for key in list(dict.fromkeys([*a, *b])):
        c = _change(section, key, a.get(key), b.get(key))
        if c.changed:
            changes.append(c)
        else:
            same += 1
    return changes, same


def _curve_points(cal: dict[str, Any]) -> dict[str, float]:
    try:
        from pqflow.market.serialize import curve_from_json

        curve = curve_from_json(cal["parameters"]["curve"])
    except (KeyError, TypeError, ValueError, ImportError):
        return {}
    out = {}
    for m in _ZERO_MATURITIES:
        if m <= curve.max_maturity:
            out[f"curve zero rate {m:g}y (continuous)"] = float(-np.log(curve.discount(m)) / m)
    return out


def _parameters(cal: dict[str, Any]) -> dict[str, Any]:
    par = {k: v for k, v in cal.get("parameters", {}).items() if k != "curve"}
    flat = _flatten(par)
    flat = {k: v for k, v in flat.items() if not k.endswith(".note")}
    return {**_curve_points(cal), **flat}


def _check_numbers(summary: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for name, c in (summary.get("checks") or {}).items():
        out[f"{name}: verdict"] = c.get("verdict")
        for key in ("cells", "max_abs_z", "outside_99", "min_ess_share", "ess_below_warning_from_time",
                    "instruments_tested"):
            if key in c:
                out[f"{name}: {key.replace('_', ' ')}"] = c.get(key)
        bench = c.get("wealth_ratio_benchmark")
        if isinstance(bench, dict):
            out[f"{name}: wealth-ratio benchmark verdict"] = bench.get("verdict")
            out[f"{name}: wealth-ratio percentiles missed"] = bench.get("failed")
        for row in c.get("rows", []) or []:
            if row.get("measure") == "market_consistent" and row.get("vol_difference_bp") is not None:
                out[f"{name}: {row['instrument']} MC - market (bp vol, Q set)"] = row["vol_difference_bp"]
    out["overall verdict"] = summary.get("verdict")
    return out


def _reconciliation(summary: dict[str, Any]) -> dict[str, Any]:
    c = (summary.get("checks") or {}).get("reconciliation") or {}
    out = dict(_flatten(c.get("values") or {}, "guarantee value"))
    g = c.get("guarantee") or {}
    for key in ("maturity", "guaranteed_amount"):
        if key in g:
            out[f"guarantee {key.replace('_', ' ')}"] = g[key]
    return out


def _load(run: Path) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    cal_path, sum_path = run / "calibration.json", run / "validation" / "summary.json"
    if not cal_path.is_file():
        raise IntegrityError(f"{run}: no calibration.json; not a pqflow run directory")
    summary = read_json(sum_path) if sum_path.is_file() else {}
    manifest = read_json(run / "manifest.json") if (run / "manifest.json").is_file() else {}
    return read_json(cal_path), summary, manifest


def _identity(cal: dict[str, Any], manifest: dict[str, Any]) -> dict[str, Any]:
    return {
        "run name": manifest.get("run_name"),
        "run id": manifest.get("run_id"),
        "valuation date": cal.get("valuation_date"),
        "configuration sha256": manifest.get("config_sha256"),
        "calibration inputs sha256": cal.get("inputs_sha256"),
        "root seed": (manifest.get("seeds") or {}).get("root_seed"),
        "scenarios per set": _per_set_text(manifest.get("scenarios")),
        "pqflow version": manifest.get("pqflow_version", cal.get("pqflow_version")),
    }


def compare_runs(run_a: str | Path, run_b: str | Path) -> Comparison:
    """Compare two run directories (A the earlier or reference run, B the new one)."""
    a, b = Path(run_a), Path(run_b)
    cal_a, sum_a, man_a = _load(a)
    cal_b, sum_b, man_b = _load(b)
    ident_a, ident_b = _identity(cal_a, man_a), _identity(cal_b, man_b)
    identity = [_change("identity", k, ident_a.get(k), ident_b.get(k)) for k in ident_a]
    inputs, same_in = _diff("inputs", _flatten(cal_a.get("inputs", {})), _flatten(cal_b.get("inputs", {})))
    params, same_par = _diff("parameters", _parameters(cal_a), _parameters(cal_b))
    ca, cb = _check_numbers(sum_a), _check_numbers(sum_b)
    checks = [_change("checks", k, ca.get(k), cb.get(k)) for k in dict.fromkeys([*ca, *cb])]
    ra, rb = _reconciliation(sum_a), _reconciliation(sum_b)
    recon = [_change("reconciliation", k, ra.get(k), rb.get(k)) for k in dict.fromkeys([*ra, *rb])]
    return Comparison(
        run_a=str(run_a), run_b=str(run_b), identity=tuple(identity), inputs=tuple(inputs),
        parameters=tuple(params), checks=tuple(checks), reconciliation=tuple(recon),
        unchanged_inputs=same_in, unchanged_parameters=same_par,
    )


def _text(v: Any) -> str:
    if v is None:
        return "–"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int):
        return f"{v:,}"
    if isinstance(v, float):
        if not math.isfinite(v):
            return "–"
        return f"{v:.6g}"
    return str(v)


def _change_text(c: Change) -> str:
    if not c.changed:
        return "="
    if c.difference is not None:
        base = c.before if _is_num(c.before) else None
        rel = f" ({c.difference / abs(float(base)):+.2%})" if base not in (None, 0) else ""
        return f"{c.difference:+.6g}{rel}"
    return "changed"


def render_compare_text(comparison: Comparison) -> list[tuple[str, str, str, str, str]]:
    """Rows ``(section, item, run A, run B, change)`` for a terminal table (see
    :data:`COMPARE_COLUMNS`); sections in order, unchanged identity rows kept for context."""
    rows = []
    for section, changes in comparison.sections().items():
        for c in changes:
            rows.append((section, c.item, _text(c.before), _text(c.after), _change_text(c)))
        if section == "inputs":
            rows.append((section, f"({comparison.unchanged_inputs} inputs unchanged)", "", "", ""))
        if section == "parameters":
            rows.append((section, f"({comparison.unchanged_parameters} parameters unchanged)", "", "", ""))
    return rows


def write_compare_html(comparison: Comparison, path: str | Path) -> Path:
    """Write the comparison as one self-contained HTML page (atomically); returns the path."""
    from pqflow.report.html import page, write_html_atomic

    parts = [f"<h1>pqflow run comparison</h1><p>Run A: <code>{escape(comparison.run_a)}</code><br>"
             f"Run B: <code>{escape(comparison.run_b)}</code></p>"]
    for section, changes in comparison.sections().items():
        body = "".join(
            f'<tr{" class=changed" if c.changed else ""}><td class="l">{escape(c.item)}</td>'
            f'<td class="l">{escape(_text(c.before))}</td><td class="l">{escape(_text(c.after))}</td>'
            f"<td>{escape(_change_text(c))}</td></tr>"
            for c in changes
        )
        note = ""
        if section == "inputs":
            note = f'<p class="note">{comparison.unchanged_inputs} inputs unchanged.</p>'
        elif section == "parameters":
            note = f'<p class="note">{comparison.unchanged_parameters} parameters unchanged.</p>'
        empty = "" if changes else '<p class="note">Nothing differs.</p>'
        table = ('<table><thead><tr><th class="l">item</th><th class="l">run A</th><th class="l">run B</th>'
                 f"<th>change</th></tr></thead><tbody>{body}</tbody></table>") if changes else ""
        parts.append(f'<section id="compare-{section}"><h2>{escape(section.capitalize())}</h2>{empty}{table}{note}</section>')
    html = page("pqflow run comparison", "".join(parts).replace("class=changed", 'style="background:#fff3d6"'))
    return write_html_atomic(path, html)
