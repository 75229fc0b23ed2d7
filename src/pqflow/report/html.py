"""The run's evidence pack as one self-contained HTML page: ``validation/report.html``.

Everything shown is read from the run's own files (``manifest.json``, ``calibration.json``,
``validation/*.csv``, ``validation/summary.json``, ``valuation/summary.json`` and the scenario
parts); nothing is recomputed from the model. The page has no script, no external reference
(plots are inline SVG drawn by :mod:`pqflow.report.svg`, styles inline) and opens offline; its
only links are to the page's own sections and to the run's CSV tables beside it. Numbers are
formatted by :mod:`pqflow.report.numbers` (one rule for the report, the terminal and compare).

The page opens with a sign-off page (:func:`_signoff`): the run in one line, every verdict and
warning, key inputs and outputs, the usable horizon of each density and the prepared-by /
reviewed-by fields; it prints on one A4 page (``@media print``). It is a derived view: the
manifest neither lists nor checks it (:data:`pqflow.storage.manifest.DERIVED_VIEWS`), so it may
be written, or rewritten, after the run was published. It is written atomically.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Callable
from dataclasses import dataclass
from html import escape
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

import pqflow.calibration.part_kinds  # noqa: F401  (the shipped part kinds, registered)
from pqflow import CAUTION, __version__
from pqflow.errors import IntegrityError, PqflowError
from pqflow.models.parts import (
    PART_KINDS,
    describe_part,
    part_fit_key,
    part_fit_text,
    part_report_rows,
    recorded_parts,
)
from pqflow.report import numbers as fmt
from pqflow.report import smile, svg
from pqflow.storage.calibration_file import (
    CALIBRATION_FILE,
    CalibrationRecord,
    calibration_path,
    plugin_part_fields,
    read_calibration_file,
)
from pqflow.storage.jsonio import write_text_atomic
from pqflow.storage.manifest import MANIFEST, ManifestRecord, read_manifest
from pqflow.storage.names import bond_maturity_of, density_column, spread_prefix
from pqflow.storage.scenario_set import ScenarioSet
from pqflow.storage.validation_summary import (
    VALIDATION_SUMMARY,
    CheckSummary,
    ValidationSummary,
    check_counts_toward_verdict,
    read_validation_summary,
)
from pqflow.storage.valuation_summary import VALUATION_SUMMARY, ValuationSummary, read_valuation_summary
from pqflow.validation.run_files import gather_at_times

__all__ = [
    "write_report",
    "build_report_html",
    "REPORT_NAME",
    "SECTIONS",
    "SignOff",
    "write_html_atomic",
    "page",
]

REPORT_NAME = "report.html"
SECTIONS = (
    ("signoff", "Sign-off summary"),
    ("identity", "Run identity"),
    ("verdicts", "Verdicts and warnings"),
    ("curve", "Today's curve"),
    ("calibration", "Calibration"),
    ("scenarios", "Scenarios by driver"),
    ("martingale", "Martingale test"),
    ("density", "Density weights"),
    ("market-consistency", "Market consistency"),
    ("real-world", "Real-world checks"),
    ("reconciliation", "Reconciliation"),
    ("liabilities", "Liability valuation"),
)
MEASURES = ("market_consistent", "real_world")
_FAN_POINTS = 120  # at most this many output times per fan chart (a long monthly grid is thinned)
_TABLE_HORIZONS = (1.0, 5.0, 10.0, 20.0, 30.0, 50.0, 100.0)
_CURVE_MATURITIES = (1.0, 5.0, 10.0, 20.0, 30.0, 50.0)
MEASURE_NAME = {"market_consistent": "market consistent (Q)", "real_world": "real world (P)"}

CSS = """
body{font:14px/1.45 system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d1d1f;margin:0;background:#f6f6f4}
main{max-width:1100px;margin:0 auto;padding:16px 24px 40px}
h1{font-size:22px;margin:8px 0 4px}h2{font-size:19px;border-bottom:2px solid #1f5f8b;padding-bottom:4px;margin-top:34px}
h3{font-size:15px;margin:18px 0 6px}
.caution{background:#fff6d6;border:1px solid #d9b441;border-left:6px solid #d9b441;
padding:8px 14px;margin:10px 0;font-size:13px}
table{border-collapse:collapse;margin:6px 0 12px;background:#fff;font-size:12.5px}
th,td{border:1px solid #ddd;padding:3px 8px;text-align:right;vertical-align:top}
th{background:#eef2f5;text-align:center}td.l,th.l{text-align:left}
td.num{font-variant-numeric:tabular-nums;white-space:nowrap}
.badge{display:inline-block;min-width:64px;text-align:center;border-radius:10px;padding:1px 9px;
font:bold 11px/18px sans-serif;letter-spacing:.05em;text-transform:uppercase;color:#fff}
.badge.pass{background:#2e7d32}.badge.fail{background:#c62828}.badge.na{background:#8a8a8a}
.badge.inconclusive{background:#d08a00}.badge.info{background:#fff;color:#1f5f8b;border:1px solid #1f5f8b}
.grid{display:grid;grid-template-columns:repeat(auto-fill,minmax(480px,1fr));gap:10px}
.pair{display:grid;grid-template-columns:minmax(0,1fr) minmax(0,1fr);gap:10px;margin-bottom:10px}
.chart{background:#fff;border:1px solid #e3e3e3}
.note{color:#555;font-size:12.5px}ul.warn li{color:#8a4b00}ul.warn{margin:4px 0 8px}
nav a{margin-right:12px}a.csv{font-size:12px;margin-right:10px}
.files{margin:2px 0 8px}.files:before{content:"Tables: ";color:#555;font-size:12px}
.signoff{background:#fff;border:1px solid #ccd;padding:6px 16px 10px;margin-top:10px}
.signoff h2{margin-top:8px}.signoff h3{margin:10px 0 4px;font-size:14px}
.signoff table{font-size:12px;margin:4px 0 6px}
.cols{display:grid;grid-template-columns:1fr 1fr;gap:0 18px}
.oneline{font-size:13px;margin:4px 0}
.sign td{height:26px;min-width:200px}
.verdict-line{font-size:15px;margin:6px 0}
details.all-rows summary{cursor:pointer;color:#1f5f8b;font-size:12.5px;margin:2px 0 10px}
@media print{
 @page{size:A4;margin:11mm 11mm 14mm;@bottom-center{content:"__CAUTION__";font:7pt sans-serif;color:#555}}
 body{background:#fff;font-size:11px}main{max-width:none;padding:0}
 nav{display:none}
 .signoff{border:none;padding:0;break-after:page;page-break-after:always;font-size:10.5px}
 .signoff table{font-size:10px}.signoff th,.signoff td{padding:1px 5px}
 .signoff h3{margin:6px 0 2px;font-size:12px}
 table,.chart,.pair,svg,figure,.caution{break-inside:avoid;page-break-inside:avoid}
 .grid,.pair{grid-template-columns:minmax(0,1fr) minmax(0,1fr)}
 td.num{white-space:normal}table{max-width:100%}svg{max-width:100%}
 h2{break-after:avoid;page-break-after:avoid;margin-top:14px}h3,h4{break-after:avoid;page-break-after:avoid}
 section{break-before:auto}
 .badge{-webkit-print-color-adjust:exact;print-color-adjust:exact}
 a{color:inherit;text-decoration:none}
 details.all-rows,a.csv,.files{display:none}
}
"""


@dataclass(frozen=True, kw_only=True)
class SignOff:
    """Names on the sign-off page (from the command line or the run configuration's
    ``[signoff]`` table); an empty name leaves a blank line to sign on paper."""

    prepared_by: str = ""
    reviewed_by: str = ""


# -- small HTML helpers -------------------------------------------------------------------

_BADGE_TEXT = {"pass": "pass", "fail": "fail", "inconclusive": "inconclusive"}


def _badge(verdict: str | None, counts: bool = True) -> str:
    """One badge: pass (green), inconclusive (amber), fail (red), n/a (grey). A result that is
    reported but does not count toward the verdict gets one outlined "info" badge that says
    whether it was met, never a red FAIL beside it."""
    v = str(verdict or "not_applicable").lower()
    if not counts:
        said = {"pass": "met", "fail": "missed", "inconclusive": "unclear"}.get(v, "n/a")
        return (f'<span class="badge info" title="reported; not part of the run verdict">'
                f"info: {said}</span>")
    cls = v if v in _BADGE_TEXT else "na"
    return f'<span class="badge {cls}">{_BADGE_TEXT.get(v, "n/a")}</span>'


def _num(v: Any, digits: int = 4) -> str:
    """Any other number: ``digits`` significant digits, never an exponent (see numbers)."""
    if isinstance(v, str):
        return escape(v)
    return escape(fmt.number(v, digits))


def _cell(text: str, *, left: bool = False) -> str:
    return f'<td class="{"l" if left else "num"}">{text}</td>'


def _table(rows: list[dict[str, Any]], columns: list[tuple[str, str]], *,
           fmts: dict[str, Callable[[dict[str, Any]], str]] | None = None) -> str:
    """``columns``: (key, header); ``fmts``: key -> function of the whole row giving the cell's
    HTML (default: strings escaped and left-aligned, numbers by :func:`_num`)."""
    fmts = fmts or {}
    head = "".join(f'<th class="{"l" if i == 0 else ""}">{escape(h)}</th>' for i, (_, h) in enumerate(columns))
    body = []
    for r in rows:
        cells = []
        for i, (k, _) in enumerate(columns):
            v = r.get(k)
            if k in fmts:
                cells.append(_cell(fmts[k](r), left=i == 0 or isinstance(v, str)))
            elif isinstance(v, str):
                cells.append(_cell(escape(v), left=True))
            else:
                cells.append(_cell(_num(v), left=i == 0))
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


# Cell formatters for _table's ``fmts``, one closure per column (a lambda with a default argument
# would not match the one-argument signature).
_CellFormat = Callable[[dict[str, Any]], str]


def _text_cell(key: str) -> _CellFormat:
    return lambda r: escape(r[key])


def _str_cell(key: str) -> _CellFormat:
    return lambda r: escape(str(r[key]))


def _money_cell(key: str) -> _CellFormat:
    return lambda r: escape(fmt.money(r.get(key)))


def _formatted_cell(key: str, f: Callable[[Any], str]) -> _CellFormat:
    return lambda r: escape(str(r.get(key))) if isinstance(r.get(key), str) else escape(f(r.get(key)))


def _long_table(rows: list[dict[str, Any]], shown: list[dict[str, Any]], columns: list[tuple[str, str]], *,
                fmts: dict[str, Callable[[dict[str, Any]], str]] | None = None, what: str = "rows") -> str:
    """A table of ``shown`` (the rows a reviewer reads first) and, folded below it, every row;
    the folded table is not printed, so the printed pack stays short and its tables unbroken."""
    if len(shown) >= len(rows):
        return _table(rows, columns, fmts=fmts)
    return (_table(shown, columns, fmts=fmts)
            + f'<details class="all-rows"><summary>All {len(rows)} {escape(what)}</summary>'
            + _table(rows, columns, fmts=fmts) + "</details>")


def _kv(pairs: list[tuple[str, Any]]) -> str:
    """Two-column table of names and values (strings escaped, numbers by :func:`_num`)."""
    def val(v: Any) -> str:
        return escape(v) if isinstance(v, str) else _num(v)

    return "<table>" + "".join(
        f'<tr><th class="l">{escape(k)}</th><td class="l">{val(v)}</td></tr>' for k, v in pairs) + "</table>"


def _csv(run_dir: Path, name: str) -> pd.DataFrame | None:
    path = run_dir / "validation" / f"{name}.csv"
    return pd.read_csv(path) if path.is_file() else None


def _files(run_dir: Path, names: list[str]) -> str:
    """Links to the run's tables behind a section (paths relative to ``validation/``)."""
    links = []
    for name in names:
        path = (run_dir / "validation" / name).resolve() if not name.startswith("../") else \
            (run_dir / name[3:]).resolve()
        if path.is_file():
            links.append(f'<a class="csv" href="{escape(name)}">{escape(name.removeprefix("../"))}</a>')
    return f'<p class="files">{"".join(links)}</p>' if links else ""


def _records(frame: pd.DataFrame | None) -> list[dict[str, Any]]:
    if frame is None:
        return []
    return [{str(k): (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict(orient="records")]


def _caution_box() -> str:
    return f'<div class="caution"><strong>Caution.</strong> {escape(CAUTION)}</div>'


def _css_string(text: str) -> str:
    """``text`` safe inside a double-quoted CSS string in a <style> element."""
    return "".join(ch if ch.isalnum() or ch in " .,;:-()'" else f"\\{ord(ch):x} " for ch in text)


def page(title: str, body: str) -> str:
    """A whole self-contained page with the caution at the top and the bottom (and, printed,
    at the foot of every page)."""
    caution = _caution_box()
    return (
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{escape(title)}</title>"
        f"<style>{CSS.replace('__CAUTION__', _css_string('Caution: ' + CAUTION))}</style></head><body><main>"
        f'<section id="caution-top">{caution}</section>'
        f"{body}"
        f'<section id="caution-bottom">{caution}</section>'
        f'<p class="note">Generated by pqflow {escape(__version__)}.</p>'
        "</main></body></html>\n"
    )


def write_html_atomic(path: str | Path, html: str) -> Path:
    """Write ``html`` to ``path`` through a temporary name in the same folder, then rename."""
    return write_text_atomic(path, html)


def _grid(charts: list[str]) -> str:
    return '<div class="grid">' + "".join(charts) + "</div>" if charts else ""


def _pair(key: str, charts: list[str]) -> str:
    """The Q and P panels of one quantity side by side (they share the y-axis)."""
    return f'<div class="pair" data-quantity="{escape(key)}">' + "".join(charts) + "</div>"


def _span(*arrays: Any) -> tuple[float, float]:
    vals = np.concatenate([np.ravel(np.asarray(a, dtype=float)) for a in arrays if a is not None])
    vals = vals[np.isfinite(vals)]
    return (float(vals.min()), float(vals.max())) if vals.size else (0.0, 1.0)


def _rate_axis(v: float) -> str:
    """Axis ticks of a rate: round percentages without trailing zeros (``2.5%``, ``-5%``)."""
    if abs(v) < 1e-12:
        return "0%"
    text = fmt.percent(round(float(v), 12), 3)[:-1]
    return (text.rstrip("0").rstrip(".") if "." in text else text) + "%"


# -- what the run is ----------------------------------------------------------------------------

def _per_set(value: Any) -> str:
    """``{"real_world": 2000, ...}`` as "real world 2,000 · market consistent 2,000"."""
    if isinstance(value, dict):
        return " · ".join(f"{m.replace('_', ' ')} {fmt.number(v) if isinstance(v, int) else fmt.years(v)}"
                          for m, v in value.items())
    return fmt.DASH if value is None else fmt.number(value)


def _short(text: Any) -> str:
    t = str(text or "")
    return t[:12] if len(t) >= 32 else t or fmt.DASH


def _or(value: Any, default: Any) -> Any:
    """``value``, or ``default`` where the file does not record it."""
    return default if value is None else value


def _one_line(run_dir: Path, manifest: ManifestRecord | None, cal: CalibrationRecord) -> str:
    """The run's identity in one line."""
    m = manifest
    scen = m.scenarios if m else None
    scen_text = (" + ".join(fmt.count(v) for v in scen.values()) + " scenarios (Q + P)") if isinstance(scen, dict) \
        else ""
    horizon = m.horizon_years if m else None
    h = max(horizon.values()) if isinstance(horizon, dict) and horizon else None
    parts = [
        f"<strong>{escape(str(_or(m.run_name if m else None, run_dir.name)))}</strong>",
        f"valuation date {escape(str(cal.valuation_date or fmt.DASH))}",
        f"run {escape(_short(m.run_id))}" if m else "manifest not written yet",
        f"created {escape(str(_or(m.created_utc, fmt.DASH)).replace('T', ' ').replace('+00:00', ' UTC'))}" if m
        else "",
        f"configuration {escape(_short(m.config_sha256))}" if m else "",
        f"seed {escape(str(_or(m.root_seed, fmt.DASH)))}" if m else "",
        escape(scen_text) if scen_text else "",
        f"{fmt.years(h)} years" if h is not None else "",
        f"pqflow {escape(str(_or(m.pqflow_version if m else None, cal.pqflow_version or '?')))}",
    ]
    return '<p class="oneline">' + " · ".join(p for p in parts if p) + "</p>"


def _identity(run_dir: Path, manifest: ManifestRecord | None, cal: CalibrationRecord) -> str:
    if manifest is None:
        pairs: list[tuple[str, Any]] = [
            ("manifest", "not written yet: identity from calibration.json only"),
            ("valuation date", str(cal.valuation_date or fmt.DASH)),
        ]
    else:
        pairs = [
            ("run name", str(_or(manifest.run_name, fmt.DASH))),
            ("run id", str(_or(manifest.run_id, fmt.DASH))),
            ("valuation date", str(_or(manifest.valuation_date, fmt.DASH))),
            ("created (UTC)", str(_or(manifest.created_utc, fmt.DASH))),
            ("configuration sha256", str(_or(manifest.config_sha256, fmt.DASH))),
            ("root seed", str(_or(manifest.root_seed, fmt.DASH))),
            ("seed scheme", str(_or(manifest.seed_scheme, fmt.DASH))),
            ("scenarios per set", _per_set(manifest.scenarios)),
            ("output times", _per_set(manifest.output_times)),
            ("horizon (years)", _per_set(manifest.horizon_years)),
            ("antithetic", "yes" if manifest.antithetic else "no"),
            ("versions", f"pqflow {_or(manifest.pqflow_version, '?')}, Python {_or(manifest.python, '?')}, "
                         f"numpy {_or(manifest.numpy, '?')}, pyarrow {_or(manifest.pyarrow, '?')}"),
            ("files in manifest", len(manifest.files)),
        ]
    pairs.append(("calibration inputs sha256", str(cal.inputs_sha256 or fmt.DASH)))
    return _kv(pairs)


# -- verdicts and warnings --------------------------------------------------------------------

def _check_figure(c: CheckSummary) -> str:
    """The key number of a check: its largest |z| against the family limit, and what is
    inconclusive."""
    bits = []
    if fmt.is_number(c.max_abs_z):
        bits.append(f"max |z| {fmt.zscore(c.max_abs_z)} / {fmt.zscore(c.family_critical_z)}")
    if c.inconclusive_cells:
        when = c.inconclusive_from_time
        bits.append(f"{fmt.count(c.inconclusive_cells)} cells inconclusive"
                    + (f" from t = {fmt.years(when)}" if fmt.is_number(when) else ""))
    return "; ".join(bits) or fmt.DASH


def _densities(summary: ValidationSummary, manifest: ManifestRecord | None) -> list[dict[str, Any]]:
    """Usable horizon of each density: from ``summary["densities"]`` when the run has it; an
    older run without it gets the time its ESS fell below the warning share, marked as such."""
    horizon = None
    if manifest and isinstance(manifest.horizon_years, dict) and manifest.horizon_years:
        horizon = max(manifest.horizon_years.values())
    rows = []
    if summary.densities is not None:
        for d in summary.densities:
            usable = d.get("usable_horizon")
            rows.append({
                "density": f"{d.get('column', '')}, {MEASURE_NAME.get(d.get('measure'), d.get('measure'))} set",
                "block": d.get("block") or "full density",
                "usable": ("to the horizon" if usable is None else f"to t = {fmt.years(usable)} years"),
                "limited": usable is not None,
                "ess": fmt.share(d.get("ess_share_at_horizon")),
                "max_w": fmt.share(d.get("max_weight_share_at_horizon")),
            })
        return rows
    for measure in MEASURES:
        chk = summary.check(f"density_{measure}")
        if not chk:
            continue
        below = chk.ess_below_warning_from_time
        at = chk.at_horizon
        col = density_column(measure)
        rows.append({
            "density": f"{col}, {MEASURE_NAME[measure]} set",
            "block": "full density",
            "usable": ("not assessed in this run; ESS above "
                       f"{fmt.share(chk.ess_warning_share, 0)} throughout" if below is None else
                       f"not assessed in this run; ESS below "
                       f"{fmt.share(chk.ess_warning_share, 0)} from t = {fmt.years(below)}"),
            "limited": below is not None and (horizon is None or below < horizon),
            "ess": fmt.share(at.ess_share),
            "max_w": fmt.share(at.max_weight_share),
        })
    return rows


def _warnings(summary: ValidationSummary, valuation: ValuationSummary | None) -> list[str]:
    out: list[str] = []
    horizons = summary.densities is not None  # then one line per density says it, below
    for name, c in summary.checks.items():
        for w in c.warnings:
            if horizons and "effective sample size" in str(w):
                continue
            for m in MEASURES:  # "real_world: ..." reads as "real world (P): ..."
                w = w.replace(f"{m}:", f"{MEASURE_NAME[m]}:")
            out.append(str(w))
        if c.verdict == "inconclusive":
            out.append(f"{name.replace('_', ' ')} is inconclusive: {_check_figure(c)}")
    inc = summary.inconclusive
    if inc is not None and inc.cells:
        when = inc.from_time
        out.append(f"{fmt.count(inc.cells)} cells cannot be judged"
                   + (f" from t = {fmt.years(when)}" if fmt.is_number(when) else "")
                   + (f" ({', '.join(map(str, inc.checks))})" if inc.checks else ""))
    for d in summary.densities or ():
        if d.get("usable_horizon") is not None:
            out.append(f"density {d.get('column')} ({MEASURE_NAME.get(d.get('measure'), d.get('measure'))}"
                       f"{', ' + str(d['block']) if d.get('block') else ''}) usable only to "
                       f"t = {fmt.years(d['usable_horizon'])} years")
    if valuation is not None:
        rec = valuation.reconciled
        if rec is not None and rec.verdict == "differ":
            out.append(f"liability valuation: market-consistent and deflated real-world values differ "
                       f"(worst {rec.worst_line}: {fmt.zscore(rec.max_abs_difference_in_se)} SE)")
        elif rec is not None and rec.verdict == "inconclusive":
            out.append(f"liability valuation: the two sets' values of {', '.join(rec.inconclusive_lines)} "
                       f"cannot be compared at the material size ({fmt.share(rec.material_share)} of the "
                       "value): inconclusive, not agreed")
    return out


def _verdict_rows(summary: ValidationSummary) -> list[tuple[str, str, str, str]]:
    """(check anchor name, label, figure, badge) for every check and informational result."""
    rows = []
    for name, c in summary.checks.items():
        counts = c.counts_toward_verdict
        rows.append((name, name.replace("_", " "), _check_figure(c), _badge(c.verdict, counts)))
        bench = c.wealth_ratio_benchmark
        if isinstance(bench, dict) and "verdict" in bench:
            rows.append((name, "equity wealth ratios vs 2005 benchmark",
                         f"{fmt.count(bench.get('failed'))} of {fmt.count(bench.get('comparisons'))} "
                         "percentiles missed",
                         _badge(bench.get("verdict"), check_counts_toward_verdict(bench, default=False))))
    return rows


def _verdicts(run_dir: Path, summary: ValidationSummary, valuation: ValuationSummary | None) -> str:
    rows = []
    for name, c in summary.checks.items():
        counts = c.counts_toward_verdict
        rows.append(
            f'<tr><td class="l"><a href="#check-{escape(name)}">{escape(name.replace("_", " "))}</a></td>'
            f'<td class="l">{escape(str(_or(c.kind, "")))}</td><td class="num">{_num(c.cells)}</td>'
            f'<td class="num">{escape(_check_figure(c))}</td>'
            f"<td>{_badge(c.verdict, counts)}</td></tr>"
        )
        bench = c.wealth_ratio_benchmark
        if isinstance(bench, dict):
            rows.append(
                f'<tr><td class="l">&nbsp;&nbsp;equity wealth ratios (2005 benchmark)</td><td class="l">'
                f'{escape(str(bench.get("source", "")))}</td><td class="num">{_num(bench.get("comparisons"))}</td>'
                f'<td class="num">{escape(fmt.count(bench.get("failed")))} missed</td>'
                f'<td>{_badge(bench.get("verdict"), check_counts_toward_verdict(bench, default=False))}</td></tr>'
            )
    power = [{"check": name.replace("_", " "),
              "deviation": (fmt.number(c.material_deviation) if fmt.is_number(c.material_deviation)
                            else str(c.material_deviation if c.material_deviation is not None
                                     else fmt.DASH)),
              "rule": str(c.power_rule or fmt.DASH)}
             for name, c in summary.checks.items() if c.power_rule
             or c.material_deviation is not None]
    power_html = ("<h3>What each check can detect</h3>" + _table(
        power, [("check", "check"), ("deviation", "material deviation"), ("rule", "power rule")],
        fmts={k: _text_cell(k) for k in ("check", "deviation", "rule")})) if power else ""
    warnings = _warnings(summary, valuation)
    warn_html = ("<h3>Warnings</h3><ul class=\"warn\">" + "".join(f"<li>{escape(w)}</li>" for w in warnings)
                 + "</ul>") if warnings else '<p class="note">No warnings.</p>'
    return (
        f"<p class=\"verdict-line\">Overall verdict: {_badge(summary.verdict)}</p>"
        f"<p class=\"note\">{escape(str(_or(summary.rule, '')))}</p>"
        + warn_html +
        "<table><thead><tr><th class=\"l\">check</th><th class=\"l\">what it tests</th><th>cells</th>"
        "<th>key figure</th><th>verdict</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>"
        '<p class="note">Three states: <span class="badge pass">pass</span> the data show no deviation; '
        '<span class="badge inconclusive">inconclusive</span> the data cannot tell (too few effective '
        'paths, too little power); <span class="badge fail">fail</span> a deviation beyond the rule. '
        '<span class="badge info">info: met</span> marks results reported beside the verdict.</p>'
        + power_html + _files(run_dir, ["summary.json"])
    )


# -- today's curve ------------------------------------------------------------------------------

def _curve_object(cal: CalibrationRecord) -> Any:
    try:
        from pqflow.market.serialize import curve_from_json

        return curve_from_json(cal.curve)
    except (KeyError, TypeError, ValueError, PqflowError):
        return None


def _curve_facts(cal: CalibrationRecord) -> dict[str, Any]:
    """Zero rates at standard maturities, the UFR, the last liquid point, the method."""
    curve = _curve_object(cal)
    cfit = cal.curve_fit
    par = cal.stored_curve
    zeros = {}
    if curve is not None:
        for m in _CURVE_MATURITIES:
            if m <= float(curve.max_maturity):
                zeros[m] = float(-np.log(curve.discount(m)) / m)
    ufr = cfit.ufr if cfit.ufr is not None else par.get("ultimate_forward_rate")
    method = cfit.method or par.get("description") or par.get("kind") or "typed-in curve"
    return {"curve": curve, "zeros": zeros, "ufr": ufr, "omega": cfit.omega,
            "llp": cfit.last_liquid_point, "alpha": cfit.alpha if cfit.alpha is not None else par.get("alpha"),
            "method": str(method), "convergence_point": cfit.convergence_point,
            "gap_bp": cfit.gap_to_omega_bp, "repricing": cfit.max_repricing_error}


def _curve_section(cal: CalibrationRecord) -> str:
    facts = _curve_facts(cal)
    curve = facts["curve"]
    if curve is None:
        return '<p class="note">No curve in calibration.json.</p>'
    end = float(curve.max_maturity)
    top = min(end, 120.0)
    t = np.linspace(0.25, top, 240)
    zero = -np.log(curve.discount(t)) / t
    fwd = np.asarray(curve.forward(t), dtype=float)
    hl, vl = [], []
    if fmt.is_number(facts["omega"]):
        hl.append((float(facts["omega"]), f"UFR {fmt.percent(facts['ufr'], 2)} annual = "
                                          f"{fmt.percent(facts['omega'], 3)} continuous"))
    if fmt.is_number(facts["llp"]):
        vl.append((float(facts["llp"]), f"last liquid point {fmt.years(facts['llp'])}y"))
    if fmt.is_number(facts["convergence_point"]) and float(facts["convergence_point"]) <= top:
        vl.append((float(facts["convergence_point"]), f"convergence {fmt.years(facts['convergence_point'])}y"))
    chart = svg.line_chart(
        title="Today's curve: zero rate and instantaneous forward (continuously compounded)",
        series=[svg.Series(label="zero (spot) rate", x=t, y=zero, colour=svg.PALETTE[0]),
                svg.Series(label="instantaneous forward", x=t, y=fwd, colour=svg.PALETTE[1], dashed=True)],
        hlines=hl, vlines=vl, y_label="rate", x_label="maturity (years)", y_format=_rate_axis,
    )
    pairs = [("method", facts["method"])]
    if fmt.is_number(facts["ufr"]):
        pairs.append(("ultimate forward rate", f"{fmt.percent(facts['ufr'], 2)} annually compounded"))
    if fmt.is_number(facts["llp"]):
        pairs.append(("last liquid point", f"{fmt.years(facts['llp'])} years"))
    if fmt.is_number(facts["alpha"]):
        pairs.append(("convergence speed alpha", fmt.number(facts["alpha"], 4)))
    if fmt.is_number(facts["gap_bp"]):
        pairs.append(("forward at the convergence point vs UFR",
                      f"{fmt.bp(facts['gap_bp'], 2, sign=True)} at {fmt.years(facts['convergence_point'])} years"))
    if fmt.is_number(facts["repricing"]):
        pairs.append(("largest repricing error of the inputs", fmt.number(facts["repricing"])))
    zeros = [{"m": f"{fmt.years(m)}y", "z": fmt.percent(z), "f": fmt.percent(float(curve.forward(m)))}
             for m, z in facts["zeros"].items()]
    ztable = _table(zeros, [("m", "maturity"), ("z", "zero rate"), ("f", "forward")],
                    fmts={"m": lambda r: escape(r["m"]), "z": lambda r: escape(r["z"]), "f": lambda r: escape(r["f"])})
    return (f'<div class="grid"><div>{chart}</div><div>{_kv(pairs)}{ztable}</div></div>'
            + _files_cal())


def _files_cal() -> str:
    return '<p class="files"><a class="csv" href="../calibration.json">calibration.json</a></p>'


# -- calibrated parameters -----------------------------------------------------------------------

def _sched_text(v: Any, show: Callable[[Any], str]) -> str:
    if isinstance(v, dict) and "knots" in v:
        vals = list(v.get("values", []))
        if not vals:
            return fmt.DASH
        if len(vals) <= 6:
            return ", ".join(f"{show(x)} from {fmt.years(k)}y" for k, x in zip(v["knots"], vals, strict=True))
        return (f"{show(vals[0])} at 0y to {show(vals[-1])} at {float(v['knots'][-1]):.0f}y "
                f"({len(vals)} pieces between {show(min(vals))} and {show(max(vals))})")
    return show(v)


def _key_parameters(cal: CalibrationRecord) -> list[dict[str, str]]:
    """Calibrated parameters with their fit error, one row per model part."""
    rows: list[dict[str, str]] = []
    if (g := cal.g2pp) is not None:
        g_fit = cal.rates_fit_of("g2pp")
        rows.append({"part": "rates, G2++",
                     "values": f"a {fmt.plain(g.a)}, σ {fmt.bp(1e4 * g.sigma, 1)}, "
                               f"b {fmt.plain(g.b)}, η {fmt.bp(1e4 * g.eta, 1)}, "
                               f"ρ {fmt.plain(g.rho, 3)}",
                     "fit": (f"swaption RMSE {fmt.bp(g_fit.rmse_bp, 2)} normal vol" if g_fit.rmse_bp is not None
                             else "typed in")})
    elif (hw := cal.hull_white) is not None:
        hw_fit = cal.rates_fit_of("hull_white")
        rows.append({"part": "rates, Hull-White",
                     "values": f"a {fmt.plain(hw.mean_reversion)}, σ {fmt.bp(1e4 * hw.volatility, 1)} "
                               "(normal, per year)",
                     "fit": (f"swaption RMSE {fmt.bp(hw_fit.rmse_bp, 2)} normal vol over {len(hw_fit.rows)} quotes"
                             if hw_fit.rmse_bp is not None else "typed in")})
    ifit = cal.part_fit("indices")
    for item in cal.indices:  # the core index first, with its dividend yield (its premium is an input)
        f = cal.part_fit("equity") if item.core else (ifit.get(item.name) or {})
        values = (f"level {fmt.plain(item.level, 6)}, dividend yield {fmt.percent(item.income_yield, 2)}, "
                  f"vol {_sched_text(item.volatility, fmt.vol_points)} pts" if item.core else
                  f"level {fmt.plain(item.level, 6)}, income yield {fmt.percent(item.income_yield, 2)}, "
                  f"vol {_sched_text(item.volatility, fmt.vol_points)} pts, "
                  f"risk premium {fmt.percent(item.risk_premium, 2)}")
        rows.append({"part": f"{item.kind} {item.name}", "values": values,
                     "fit": (f"max vol error {fmt.vol_points(f['max_abs_vol_error'])} pts"
                             if "max_abs_vol_error" in f else "typed in")})
    for _, legacy, entry in recorded_parts(cal.parameters, {}):  # kinds with an entry of their own (inflation)
        rows += part_report_rows(legacy, entry, cal.part_fit(part_fit_key(legacy)), fmt)
    cfits = cal.credit_fit.by_rating()
    credit = cal.credit
    for r in credit.ratings if credit is not None else ():
        c, rf = r.cir, cfits.get(r.name)
        rows.append({"part": f"credit {r.name}, CIR++",
                     "values": f"κ {fmt.plain(c.mean_reversion)}, μ {fmt.percent(c.long_run_mean, 2)}, "
                               f"ν {fmt.plain(c.volatility)}, y0 {fmt.percent(c.initial, 2)}, "
                               f"recovery {fmt.share(r.recovery, 0)}",
                     "fit": (f"spreads repriced to {fmt.bp(rf.max_abs_error_bp, 2)}"
                             if rf is not None else "typed in")})
    recorded_sections = cal.inputs.get("parts") or {}
    for name, entry in cal.plugin_parts.items():
        lams = plugin_part_fields(entry, CALIBRATION_FILE, name)[1]
        kind = PART_KINDS.get(name)
        fitted = part_fit_text(kind, cal.part_fit(part_fit_key(kind)), fmt) if kind is not None else None
        rows.append({"part": f"{name} (part plug-in)", "values": describe_part(name, recorded_sections.get(name)),
                     "fit": (fitted or "built from its section") + (
                         "; prices of risk " + ", ".join(f"{d} {_sched_text(v, lambda x: fmt.plain(x, 3))}"
                                                         for d, v in lams.items()) if lams else "")})
    mpr = cal.market_prices_of_risk
    if mpr is not None:
        rows.append({"part": "real world: prices of risk",
                     "values": f"rates {_sched_text(mpr.rates, lambda x: fmt.plain(x, 3))}; "
                               f"equity {_sched_text(mpr.equity, lambda x: fmt.plain(x, 3))}",
                     "fit": "from the house view"})
    return rows


_RATE_WORDS = ("rate", "spread", "hazard", "shift", "yield", "return")


def _column_format(col: str, *, vols_in_bp: bool = False) -> Callable[[Any], str]:
    """The formatter of a table column by what its name says it holds (numbers module rules)."""
    c = col.lower()
    if c in ("expiry", "tenor", "maturity", "horizon", "time", "t", "convergence_point", "last_liquid_point",
             "bucket_ends") or c.endswith("_years"):
        return fmt.years
    if "correlation" in c or "variance" in c or c in ("alpha", "weight", "feller_ratio"):
        return lambda v: fmt.plain(v, 4)
    if "premium" in c or c in ("ufr", "omega", "initial") or c.endswith("long_run_mean"):
        return fmt.percent
    if c.endswith("_bp"):
        return lambda v: fmt.bp(v, 2)
    if c in ("market_vol", "model_vol", "mc_implied_vol"):
        return (lambda v: fmt.bp(v, 1)) if vols_in_bp else fmt.vol_points
    if c == "vol_error":
        return lambda v: fmt.vol_points(v) + (" pts" if fmt.is_number(v) and abs(float(v)) >= fmt.TINY else "")
    if c.startswith("z") or c.endswith("z_score") or c.startswith("z_"):
        return fmt.zscore
    if any(w in c for w in _RATE_WORDS) and "price" not in c:
        return fmt.percent
    if "price" in c or "value" in c or "factor" in c or "annuity" in c:
        return lambda v: fmt.number(v, 6)
    if c in ("policies", "cells", "rows", "comparisons"):
        return fmt.count
    return lambda v: fmt.number(v, 4)


def _fit_table(rows: list[dict[str, Any]], *, vols_in_bp: bool) -> str:
    cols = [k for k in rows[0].keys() if not isinstance(rows[0][k], (list, dict))
            and any(r.get(k) is not None for r in rows)]  # a column empty in every row says nothing
    fmts: dict[str, _CellFormat] = {}
    for k in cols:
        f = _column_format(k, vols_in_bp=vols_in_bp)
        if k == "strike" and all(fmt.is_number(r.get(k)) and abs(float(r[k])) < 1 for r in rows):
            f = fmt.percent  # a rate strike (caps, floors); index strikes are levels
        fmts[k] = _formatted_cell(k, f)
    return _table(rows, [(k, k.replace("_", " ")) for k in cols], fmts=fmts)


def _fit_scalar(key: str, v: Any) -> str:
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, str):
        return v
    if isinstance(v, list):
        if all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v) and v:
            f = _column_format(key)
            if "volatilities" in key:
                f = fmt.vol_points
            return ", ".join(f(x) for x in v) if len(v) <= 12 else f"{len(v)} values (see calibration.json)"
        return ", ".join(map(str, v)) if len(v) <= 12 else f"{len(v)} values (see calibration.json)"
    if isinstance(v, dict):
        return "(see calibration.json)"
    if key in ("ufr", "omega", "forward_at_convergence"):
        return fmt.percent(v)
    if key in ("max_repricing_error", "max_abs_vol_error"):
        return fmt.number(v) if key == "max_repricing_error" else fmt.vol_points(v) + " pts"
    return _column_format(key)(v)


def _calibration(cal: CalibrationRecord) -> str:
    html = ["<h3>Calibrated parameters and fit</h3>",
            _table(_key_parameters(cal), [("part", "part"), ("values", "parameters"), ("fit", "fit error")],
                   fmts={k: _text_cell(k) for k in ("part", "values", "fit")})]
    if (dc := cal.driver_correlation) is not None:
        html.append(f'<p class="note">Drivers (correlation matrix in calibration.json): '
                    f'{escape(", ".join(dc.drivers))}.</p>')
    charts: list[str] = []
    for entry in cal.fit_entries():  # the Heston smile fits: pqflow.report.smile, below
        name = entry.name
        vols_in_bp = name in ("hull_white", "g2pp")
        html.append(f"<h3>Fit: {escape(name.replace('_', ' '))}</h3>")
        html.append(_kv([(k.replace("_", " "), _fit_scalar(k, v)) for k, v in entry.fields.items()]))
        rows = [dict(r) for r in entry.rows]
        if rows:
            err = next((k for k in ("vol_error", "difference_bp", "error_bp") if k in rows[0]), None)
            exact = err is not None and all(fmt.is_number(r.get(err)) and abs(float(r[err])) < 1e-8 for r in rows)
            if exact:  # a bootstrap that reprices every quote: the rows are reference, folded
                html.append(f'<details class="all-rows"><summary>All {len(rows)} quotes, each repriced exactly '
                            f"(largest error &lt; "
                            f"1e-10)</summary>{_fit_table(rows, vols_in_bp=vols_in_bp)}</details>")
            else:
                html.append(_fit_table(rows, vols_in_bp=vols_in_bp))
            charts += _fit_chart(name, rows)
        caps = entry.caps
        if caps is not None and caps.rows:
            html.append("<h3>Fit: year-on-year caps and floors</h3>")
            html.append(_kv([(k.replace("_", " "), _fit_scalar(k, v)) for k, v in caps.fields.items()]))
            html.append(_fit_table([dict(r) for r in caps.rows], vols_in_bp=False))
    html.append(smile.smile_fit_html(cal.heston_fits))
    if not cal.fit:
        html.append('<p class="note">No fit record in calibration.json (parameters typed in).</p>')
    html.append(_grid(charts))
    html.append(_files_cal())
    return "".join(html)


def _fit_chart(name: str, rows: list[dict[str, Any]]) -> list[str]:
    """Model - market by instrument; a bootstrap that reprices exactly gets a sentence, not a
    chart of rounding noise."""
    if "vol_difference_bp" in rows[0]:
        labels = [f"{fmt.years(r.get('expiry', 0))}x{fmt.years(r.get('tenor', 0))}" for r in rows]
        values = [float(r["vol_difference_bp"]) for r in rows]
        unit, title = "bp of normal vol", f"Calibration fit, {name.replace('_', ' ')}: model - market vol (bp)"
    elif "vol_error" in rows[0]:
        labels = [f"{fmt.years(r.get('expiry', 0))}y" for r in rows]
        values = [100.0 * float(r["vol_error"]) for r in rows]
        unit, title = "vol points", f"Calibration fit, {name.replace('_', ' ')}: model - market vol (points)"
    else:
        return []
    if max(abs(v) for v in values) < 1e-8:
        return [f'<p class="note">{escape(title)}: every quote repriced exactly (largest error &lt; 1e-10).</p>']
    return [svg.bar_chart(title=title, labels=labels, values=values, y_label=unit, min_span=0.5)]


# -- scenarios by driver -----------------------------------------------------------------------

@dataclass(frozen=True)
class _Driver:
    group: str
    label: str
    columns: tuple[str, ...]
    kind: str  # "rate" (shown in %), "level" (log axis), "index" (linear)
    transform: Callable[[dict[str, np.ndarray]], np.ndarray]


def _column_of(c: str) -> Callable[[dict[str, np.ndarray]], np.ndarray]:
    return lambda d: d[c]


def _zero_yield_of(c: str, m: float) -> Callable[[dict[str, np.ndarray]], np.ndarray]:
    return lambda d: -np.log(d[c]) / m


def _drivers(names: list[str]) -> list[_Driver]:
    """Every modelled driver of a set, grouped by asset class, from its column names."""
    out: list[_Driver] = []
    have = set(names)
    bonds = sorted((m, c) for c in names if (m := bond_maturity_of(c)) is not None)
    if "short_rate" in have:
        out.append(_Driver("Nominal rates", "short rate", ("short_rate",), "rate", lambda d: d["short_rate"]))
    if bonds:
        m, c = bonds[-1]
        out.append(_Driver("Nominal rates", f"{fmt.years(m)}-year zero yield", (c,), "rate",
                           _zero_yield_of(c, m)))
    for c in names:
        if c.startswith("equity_"):
            out.append(_Driver("Equity", f"{c[len('equity_'):]} (total return index)", (c,), "level",
                               _column_of(c)))
    for c in names:
        if c.startswith("property_"):
            out.append(_Driver("Property", f"{c[len('property_'):]} (total return index)", (c,), "level",
                               _column_of(c)))
    if "cpi" in have:
        out.append(_Driver("Inflation and real rates", "CPI", ("cpi",), "level", lambda d: d["cpi"]))
    if "real_short_rate" in have:
        out.append(_Driver("Inflation and real rates", "real short rate", ("real_short_rate",), "rate",
                           lambda d: d["real_short_rate"]))
    reals = sorted((float(c[len("real_zcb_"):-1]), c) for c in names
                   if c.startswith("real_zcb_") and c.endswith("y") and c[len("real_zcb_"):-1].replace(".",
                                                                                                       "").isdigit())
    if reals:
        m, c = reals[-1]
        out.append(_Driver("Inflation and real rates", f"{fmt.years(m)}-year real zero yield", (c,), "rate",
                           _zero_yield_of(c, m)))
    for c in names:
        if c.startswith("intensity_"):
            rating = c[len("intensity_"):]
            out.append(_Driver("Credit", f"{rating} default intensity", (c,), "rate", _column_of(c)))
            spreads = sorted((float(s.rsplit("_", 1)[1][:-1]), s) for s in names
                             if s.startswith(spread_prefix(rating)) and s.endswith("y")
                             and s.rsplit("_", 1)[1][:-1].replace(".", "").isdigit())
            if spreads:
                m, s = spreads[-1]
                out.append(_Driver("Credit", f"{rating} {fmt.years(m)}-year credit spread", (s,), "rate",
                                   _column_of(s)))
    return out


_PCTS = (1, 5, 25, 50, 75, 95, 99)


def _fan_data(run_dir: Path) -> tuple[list[_Driver], dict[str, dict[str, Any]]]:
    """Percentiles of every driver at (at most :data:`_FAN_POINTS`) output times, per set."""
    data: dict[str, dict[str, Any]] = {}
    drivers: list[_Driver] | None = None
    for measure in MEASURES:
        reader = ScenarioSet(run_dir=run_dir, measure=measure)
        names = reader.column_names()
        mine = _drivers(names)
        drivers = mine if drivers is None else [d for d in drivers if d.label in {x.label for x in mine}]
        cols = list(dict.fromkeys(c for d in mine for c in d.columns))
        grid, _ = next(reader.iter_arrays(["short_rate"] if "short_rate" in names else cols[:1]))
        keep = np.unique(np.r_[np.arange(0, grid.size, max(1, -(-grid.size // _FAN_POINTS))), grid.size - 1])
        wanted = sorted(set(grid[keep].tolist()) | {t for t in _TABLE_HORIZONS if t <= grid[-1]})
        times, values = gather_at_times(reader, cols, wanted)
        item: dict[str, Any] = {"times": times, "quantities": {}}
        for d in mine:
            x = d.transform(values)
            item["quantities"][d.label] = dict(zip(_PCTS, np.percentile(x, _PCTS, axis=0), strict=True))
        data[measure] = item
    return drivers or [], data


def _percentile_table(driver: _Driver, data: dict[str, dict[str, Any]]) -> str:
    """Percentiles at chosen horizons, the Q set's block beside the P set's (never interleaved)."""
    show = fmt.percent if driver.kind == "rate" else (lambda v: fmt.number(v, 4))
    times = data[MEASURES[0]]["times"]
    horizons = [t for t in _TABLE_HORIZONS if np.any(np.isclose(times, t))]
    if times.size and float(times[-1]) not in horizons:
        horizons.append(float(times[-1]))
    pcts = (1, 5, 50, 95, 99)
    head = ('<tr><th class="l" rowspan="2">year</th>' + "".join(
        f'<th colspan="{len(pcts)}">{escape(MEASURE_NAME[m])}</th>' for m in MEASURES) + "</tr><tr>"
        + "".join(f"<th>{p}%</th>" for _ in MEASURES for p in pcts) + "</tr>")
    body = []
    for h in horizons:
        cells = []
        for m in MEASURES:
            tm = data[m]["times"]
            idx = np.flatnonzero(np.isclose(tm, h))
            q = data[m]["quantities"].get(driver.label)
            for p in pcts:
                cells.append(_cell(escape(show(float(q[p][idx[0]]))) if idx.size and q is not None else fmt.DASH))
        body.append(f'<tr><td class="l">{fmt.years(h)}</td>{"".join(cells)}</tr>')
    return f"<table><thead>{head}</thead><tbody>{''.join(body)}</tbody></table>"


def _scenarios(run_dir: Path) -> str:
    drivers, data = _fan_data(run_dir)
    html = ['<p class="note">Percentile bands 1-99%, 5-95%, 25-75% and the median at each output time, '
            "each set under its own measure (unweighted). The market-consistent (Q) and real-world (P) "
            "panels of one driver share their y-axis. Rates are continuously compounded; index levels "
            "are drawn on a logarithmic axis. Every path is in the scenario files "
            "(<code>pqflow export RUN --measure ...</code>).</p>"]
    group = None
    for d in drivers:
        if d.group != group:
            group = d.group
            html.append(f'<h3 class="group">{escape(group)}</h3>')
        lo, hi = _span(*[data[m]["quantities"][d.label][p] for m in MEASURES for p in (1, 99)])
        charts = []
        for i, measure in enumerate(MEASURES):
            item = data[measure]
            charts.append(svg.fan_chart(
                title=f"{d.label}, {MEASURE_NAME[measure]}", times=item["times"],
                percentiles={p: v for p, v in item["quantities"][d.label].items()}, colour=svg.PALETTE[i],
                y_label="rate" if d.kind == "rate" else "level (log scale)" if d.kind == "level" else "level",
                y_format=_rate_axis if d.kind == "rate" else svg._fmt_default,
                log_y=d.kind == "level", y_range=(lo, hi),
            ))
        html.append(f"<h4>{escape(d.label)}</h4>" + _pair(d.label, charts) + _percentile_table(d, data))
    return "".join(html)


# -- checks ------------------------------------------------------------------------------------

def _martingale(run_dir: Path, summary: ValidationSummary) -> str:
    table = _csv(run_dir, "martingale")
    html = []
    for measure in MEASURES:
        c = summary.check_or_absent(f"martingale_{measure}")
        html.append(f'<h3 id="check-martingale_{measure}">{escape(MEASURE_NAME[measure])} '
                    f"{_badge(c.verdict)}</h3>")
        worst = c.worst_cell
        html.append(_kv([
            ("cells", fmt.count(c.cells)),
            ("outside 95% / by chance",
             f"{fmt.count(c.outside_95)} / {fmt.number(c.expected_outside_95_by_chance, 3)}"),
            ("outside 99% / by chance",
             f"{fmt.count(c.outside_99)} / {fmt.number(c.expected_outside_99_by_chance, 3)}"),
            ("max |z| / family limit", f"{fmt.zscore(c.max_abs_z)} / {fmt.zscore(c.family_critical_z)}"),
            ("worst cell",
             ", ".join(f"{k} {fmt.zscore(v) if k == 'z_score' else fmt.number(v, 6) if not isinstance(v, str) else v}"
                                     for k, v in worst.items())),
        ]))
    if table is not None:
        assets = list(dict.fromkeys(table["asset"]))
        bonds = sorted((bond_maturity_of(a), a) for a in assets if bond_maturity_of(a) is not None)
        chosen = ["deflator", *[a for a in assets if a.startswith(("equity_", "property_"))]]
        chosen += [b for _, b in bonds[:1]] + ([b for _, b in bonds[-1:]] if len(bonds) > 1 else [])
        chosen += [a for a in assets if a == "cpi"] + [a for a in assets if a.startswith("real_zcb_")][-1:]
        longest_by_rating: dict[str, str] = {}
        for a in assets:  # dzcb_{rating}_{m}y, in maturity order: keep the longest per rating
            if a.startswith("dzcb_"):
                longest_by_rating[a[len("dzcb_"):].rsplit("_", 1)[0]] = a
        chosen += list(longest_by_rating.values())
        html.append('<p class="note">Mean deflated price over today\'s price by time, with the band '
                    "1 ± z SE at the family limit; Q and P panels of one asset share the y-axis.</p>")
        for a in chosen:
            subs = {m: table[(table["measure"] == m) & (table["asset"] == a)] for m in MEASURES}
            zs = {m: summary.check_or_absent(f"martingale_{m}").critical_z(2.58) for m in MEASURES}
            lo, hi = _span(*[np.r_[s["ratio"].to_numpy(), 1 - zs[m] * s["ratio_std_error"].to_numpy(),
                                   1 + zs[m] * s["ratio_std_error"].to_numpy()] for m, s in subs.items()])
            charts = []
            for m, s in subs.items():
                x, r, se = s["time"].to_numpy(), s["ratio"].to_numpy(), s["ratio_std_error"].to_numpy()
                charts.append(svg.line_chart(
                    title=f"{a}: mean deflated / today's price, {MEASURE_NAME[m]}",
                    series=[svg.Series(label="ratio", x=x, y=r, colour=svg.PALETTE[0])],
                    bands=[svg.Band(label=f"1 ± {zs[m]:.2f} SE", x=x, lower=1 - zs[m] * se, upper=1 + zs[m] * se,
                                    colour=svg.PALETTE[2], opacity=0.25)],
                    hlines=[(1.0, "1")], y_label="ratio", y_range=(lo, hi),
                ))
            html.append(_pair(f"martingale {a}", charts))
    html.append(_files(run_dir, ["martingale.csv"]))
    return "".join(html)


def _density(run_dir: Path, summary: ValidationSummary, manifest: ManifestRecord | None) -> str:
    table = _csv(run_dir, "density")
    html = []
    share = None
    for measure in MEASURES:
        c = summary.check_or_absent(f"density_{measure}")
        share = c.ess_warning_share_or(share)
        col = "q_density (dQ/dP)" if measure == "real_world" else "p_density (dP/dQ)"
        html.append(f'<h3 id="check-density_{measure}">{escape(MEASURE_NAME[measure])}: {col} '
                    f"{_badge(c.verdict)}</h3>")
        at = c.at_horizon
        pairs = [
            ("max |z| of the mean weight / family limit",
             f"{fmt.zscore(c.max_abs_z)} / {fmt.zscore(c.family_critical_z)}"),
            ("lowest ESS share", fmt.share(c.min_ess_share)),
            ("largest single-path weight share", fmt.share(c.max_weight_share)),
            ("ESS below warning share from", "never" if c.ess_below_warning_from_time is None
             else f"t = {fmt.years(c.ess_below_warning_from_time)} years"),
            ("at the horizon: mean weight ± SE", fmt.price_se(at.mean_weight, at.std_error)),
        ]
        if c.inconclusive_cells:
            pairs.append(("cells that cannot be judged", _check_figure(c)))
        if c.power_rule:
            pairs.append(("power rule", str(c.power_rule)))
        if c.material_deviation is not None:
            pairs.append(("material deviation", fmt.number(c.material_deviation)
                          if fmt.is_number(c.material_deviation)
                          else str(c.material_deviation)))
        html.append(_kv(pairs))
    dens = _densities(summary, manifest)
    if dens:
        html.append("<h3>Usable horizon of each density</h3>")
        html.append(_table(dens, [("density", "density"), ("block", "block"), ("usable", "usable"),
                                  ("ess", "ESS share at horizon"), ("max_w", "largest weight share at horizon")],
                           fmts={k: _str_cell(k) for k in ("density", "block", "usable", "ess",
                                                                                 "max_w")}))
    budget = summary.density_budget
    if isinstance(budget, dict) and budget:
        html.append("<h3>Density budget: share of the log-density variance by price of risk</h3>")
        rows = [{"measure": MEASURE_NAME.get(m, m), "price": p, "share": v}
                for m, by in budget.items() if isinstance(by, dict) for p, v in by.items()]
        html.append(_table(rows, [("measure", "set"), ("price", "price of risk"), ("share", "share at the horizon")],
                           fmts={"measure": lambda r: escape(str(r["measure"])),
                                 "price": lambda r: escape(str(r["price"])),
                                 "share": lambda r: escape(fmt.share(r["share"]))}))
    if table is not None:
        series_ess, series_w, bands_w = [], [], []
        for i, measure in enumerate(MEASURES):
            t = table[(table["measure"] == measure) & (table["time"] > 0)]
            x = t["time"].to_numpy()
            series_ess.append(svg.Series(label=MEASURE_NAME[measure], x=x, y=t["ess_share"].to_numpy(),
                                         colour=svg.PALETTE[i]))
            z = summary.check_or_absent(f"density_{measure}").critical_z(2.58)
            se = t["std_error"].to_numpy()
            series_w.append(svg.Series(label=MEASURE_NAME[measure], x=x, y=t["mean_weight"].to_numpy(),
                                       colour=svg.PALETTE[i]))
            bands_w.append(svg.Band(label="", x=x, lower=1 - z * se, upper=1 + z * se, colour=svg.PALETTE[i],
                                    opacity=0.15))
        hl = [(float(share), f"warning share {float(share):.0%}")] if share is not None else []
        html.append(_grid([
            svg.line_chart(title="Effective sample size share by time", series=series_ess, hlines=hl,
                           y_label="ESS / paths", y_format=lambda v: fmt.share(v, 0)),
            svg.line_chart(title="Mean density weight by time (bands: 1 ± z SE)", series=series_w,
                           bands=bands_w, hlines=[(1.0, "1")], y_label="mean weight"),
        ]))
    html.append(_files(run_dir, ["density.csv", "density_budget.csv"]))
    return "".join(html)


def _is_normal(r: dict[str, Any]) -> bool:
    return str(r.get("convention", "")).startswith("normal")


def _vol_text(v: Any, r: dict[str, Any]) -> str:
    if not fmt.is_number(v):
        return fmt.DASH
    return fmt.bp(1e4 * float(v), 1) if _is_normal(r) else fmt.vol_points(v) + " pts"


def _market_consistency(run_dir: Path, summary: ValidationSummary) -> str:
    c = summary.check("market_consistency")
    if c is None:
        return '<p class="note">This run predates the market-consistency check.</p>'
    html = [f'<h3 id="check-market_consistency">Calibration instruments repriced from the files '
            f"{_badge(c.verdict)}</h3>", f'<p class="note">{escape(c.rule_text)}</p>']
    for u in c.not_testable:
        html.append(f'<p class="note">{escape(str(u.instrument))}: {escape(str(u.reason))}</p>')
    rows = _records(_csv(run_dir, "market_consistency"))
    if rows:
        for measure in MEASURES:
            sub = [r for r in rows if r.get("measure") == measure]
            if not sub:
                continue
            html.append(f"<h3>{escape(MEASURE_NAME[measure])} set</h3>")
            worst = sorted(sub, key=lambda r: -max(abs(float(r.get("z_market") or 0.0)), abs(float(r.get("z_model")
                                                                                                   or 0.0))))[:10]
            if len(worst) < len(sub):
                html.append(f'<p class="note">The {len(worst)} instruments furthest from their quote or model price '
                            f"(largest |z|); all {len(sub)} below and in market_consistency.csv.</p>")
            html.append(_long_table(sub, worst, what="instruments", columns=[
                ("instrument", "instrument"), ("mc_price", "MC price ± SE"),
                ("market_price", "market price"), ("model_price", "model price"),
                ("market_vol", "market vol"), ("mc_implied_vol", "MC implied vol"),
                ("vol_difference_bp", "MC - market"), ("z_score", "z beyond tolerance"), ("z_model", "z vs model"),
            ], fmts={
                "instrument": lambda r: escape(str(r["instrument"])),
                "mc_price": lambda r: escape(fmt.price_se(r.get("mc_price"), r.get("std_error"))),
                "market_price": lambda r: escape(fmt.price(r.get("market_price"), r.get("std_error"))),
                "model_price": lambda r: escape(fmt.price(r.get("model_price"), r.get("std_error"))),
                "market_vol": lambda r: escape(_vol_text(r.get("market_vol"), r)),
                "mc_implied_vol": lambda r: escape(_vol_text(r.get("mc_implied_vol"), r)),
                "vol_difference_bp": lambda r: escape(
                    fmt.DASH if not fmt.is_number(r.get("vol_difference_bp")) else
                    f"{fmt.bp(r['vol_difference_bp'], 1, sign=True)} ± {fmt.number(r.get('vol_std_error_bp'), 2)}"
                    + ("" if _is_normal(r) else " (bp of vol)")),
                "z_score": lambda r: escape(fmt.zscore(r.get("z_score"))),
                "z_model": lambda r: escape(fmt.zscore(r.get("z_model"))),
            }))
        charts = []
        groups: dict[str, dict[str, list[dict[str, Any]]]] = {}
        for r in rows:
            if r.get("vol_difference_bp") is None:
                continue
            kind = "swaptions" if str(r.get("type", "")).startswith("swaption") else "equity options"
            groups.setdefault(kind, {}).setdefault(r["measure"], []).append(r)
        for kind, by in groups.items():
            vals = [float(r["vol_difference_bp"]) + s * 2 * float(r.get("vol_std_error_bp") or 0)
                    for sub in by.values() for r in sub for s in (-1, 1)]
            tol = [float(r.get("vol_tolerance_bp") or 0) for sub in by.values() for r in sub]
            lo, hi = min(vals + [-max(tol or [0])]), max(vals + [max(tol or [0])])
            pair = []
            for i, measure in enumerate(MEASURES):
                sub = by.get(measure, [])
                if not sub:
                    continue
                labels = [r["instrument"].replace("swaption ", "").replace("equity call ", "").split(" K=")[0]
                          for r in sub]
                pair.append(svg.bar_chart(
                    title=f"{kind}: MC implied - market vol, {MEASURE_NAME[measure]} (bp; whiskers 2 SE; band: "
                          f"tolerance)",
                    labels=labels, values=[r["vol_difference_bp"] for r in sub],
                    errors=[2 * (r.get("vol_std_error_bp") or 0.0) for r in sub], y_label="bp of vol",
                    tolerance=float(sub[0].get("vol_tolerance_bp") or 0.0) if len({r.get("convention")
                                                                                   for r in sub}) == 1 else None,
                    colour=svg.PALETTE[i], y_range=(lo, hi),
                ))
            charts.append(_pair(f"market consistency {kind}", pair))
        html.append("".join(charts))
    html.append(_files(run_dir, ["market_consistency.csv"]))
    return "".join(html)


def _pct_format(quantity: str) -> Callable[[Any], str]:
    q = quantity.lower()
    if any(w in q for w in ("rate", "yield", "spread", "intensity", "return")):
        return fmt.percent
    return lambda v: fmt.number(v, 4)


def _real_world(run_dir: Path, summary: ValidationSummary) -> str:
    chk = summary.check("real_world")
    if chk is None:
        return '<p class="note">This run predates the real-world check.</p>'
    html = [f'<h3 id="check-real_world">Targets {_badge(chk.verdict)}</h3>',
            f'<p class="note">{escape(chk.rule_text)}</p>']
    fit = chk.house_view_fit
    if fit is not None:
        html.append(f'<p class="note">House view ({escape(str(fit.quantity))}): the model\'s real-world '
                    f'expectation lies within {escape(fmt.bp(fit.max_abs_gap_bp, 2))} of the house-view '
                    f'path.</p>')
    targets = _csv(run_dir, "real_world_targets")
    charts = []
    if targets is not None and len(targets):
        z = chk.critical_z(2.58)
        for name, t in targets.groupby("target", sort=False):
            x = t["time"].to_numpy()
            se = t["std_error"].to_numpy()
            est = t["estimate"].to_numpy()
            charts.append(svg.line_chart(
                title=f"{name}: simulated (band ± {z:.2f} SE) vs target", y_label="rate",
                series=[svg.Series(label="simulated", x=x, y=est, colour=svg.PALETTE[1]),
                        svg.Series(label="target", x=x, y=t["expected"].to_numpy(), colour="#222", dashed=True)],
                bands=[svg.Band(label="", x=x, lower=est - z * se, upper=est + z * se, colour=svg.PALETTE[1])],
                y_format=_rate_axis,
            ))
        every = _records(targets)
        at = [r for r in every if any(abs(float(r["time"]) - h) < 1e-9 for h in _TABLE_HORIZONS)]
        html.append(_long_table(every, at or every[:12], what="rows", columns=[
            ("target", "target"), ("time", "t"), ("expected", "target value"), ("estimate", "simulated ± SE"),
            ("z_score", "z")], fmts={
                "target": lambda r: escape(str(r["target"])), "time": lambda r: escape(fmt.years(r["time"])),
                "expected": lambda r: escape(fmt.percent(r["expected"])),
                "estimate": lambda r: escape(f"{fmt.percent(r['estimate'])} ± {fmt.percent(r['std_error'])}"),
                "z_score": lambda r: escape(fmt.zscore(r["z_score"]))}))
        html.append('<p class="note">Rows at 1, 5, 10, 20, 30 and 50 years shown; every row is folded above '
                    "and in real_world_targets.csv.</p>")
    html.append(_grid(charts))
    html.append(_files(run_dir, ["real_world_targets.csv"]))
    bench = chk.wealth_ratio_benchmark or {}
    html.append(f"<h3>Equity gross wealth ratios against the 2005 benchmark "
                f"{_badge(bench.get('verdict'), check_counts_toward_verdict(bench, default=False))}</h3>")
    html.append(f'<p class="note">Reported beside the verdict, not part of it. {escape(str(bench.get("source", "")))}; '
                f'{escape(str(bench.get("rule", "")))}. The benchmark numbers were written into the project '
                "from memory.</p>")
    b_rows = _records(_csv(run_dir, "wealth_ratio_benchmark"))
    if b_rows:
        html.append(_table(b_rows, [("horizon", "horizon (y)"), ("percentile", "percentile"), ("tail", "tail"),
                                    ("model", "model"), ("requirement", "must be"), ("benchmark", "benchmark"),
                                    ("pass", "result")], fmts={
            "horizon": lambda r: escape(fmt.years(r["horizon"])),
            "percentile": lambda r: escape(fmt.share(r["percentile"])),
            "tail": lambda r: escape(str(r["tail"])), "model": lambda r: escape(fmt.number(r["model"], 3)),
            "requirement": lambda r: escape(str(r["requirement"])),
            "benchmark": lambda r: escape(fmt.number(r["benchmark"], 3)),
            "pass": lambda r: "met" if str(r.get("pass")) in ("True", "true", "1") else "<strong>missed</strong>"}))
    html.append(_files(run_dir, ["wealth_ratio_benchmark.csv"]))
    by_index = smile.wealth_ratio_by_index_html(_records(_csv(run_dir, "wealth_ratio_by_index")), bench.get("by_index"))
    html.append(by_index + (_files(run_dir, ["wealth_ratio_by_index.csv"]) if by_index else ""))
    stats = _records(_csv(run_dir, "real_world_statistics"))
    if stats:
        html.append("<h3>Moments (pooled annual steps; reported)</h3>")
        html.append(_table(stats, [("statistic", "statistic"), ("measure", "set"), ("value", "value")], fmts={
            "statistic": lambda r: escape(str(r["statistic"])),
            "measure": lambda r: escape(MEASURE_NAME.get(r["measure"], str(r["measure"]))),
            "value": lambda r: escape(_pct_format(str(r["statistic"]))(r["value"])
                                      if "change" not in str(r["statistic"])
                                      else fmt.percent(r["value"]))}))
        html.append(_files(run_dir, ["real_world_statistics.csv"]))
    pct = _records(_csv(run_dir, "real_world_percentiles"))
    if pct:
        html.append("<h3>Percentiles at chosen horizons (reported)</h3>")
        pcols = [k for k in pct[0] if k.startswith("p") and k[1:].replace(".", "").isdigit()]
        for quantity in dict.fromkeys(r["quantity"] for r in pct):
            show = _pct_format(quantity)
            sub = {m: {r["horizon"]: r for r in pct if r["quantity"] == quantity and r["measure"] == m}
                   for m in MEASURES}
            horizons = sorted({h for by in sub.values() for h in by})
            head = ('<tr><th class="l" rowspan="2">year</th>' + "".join(
                f'<th colspan="{len(pcols) + 1}">{escape(MEASURE_NAME[m])}</th>' for m in MEASURES if sub[m])
                + "</tr><tr>" + "".join("<th>mean</th>" + "".join(f"<th>{escape(k[1:])}%</th>" for k in pcols)
                                         for m in MEASURES if sub[m]) + "</tr>")
            body = []
            for h in horizons:
                cells = []
                for m in MEASURES:
                    if not sub[m]:
                        continue
                    r = sub[m].get(h)
                    cells += [_cell(escape(show(r[k])) if r else fmt.DASH) for k in ("mean", *pcols)]
                body.append(f'<tr><td class="l">{fmt.years(h)}</td>{"".join(cells)}</tr>')
            html.append(f"<h4>{escape(str(quantity).replace('_', ' '))}</h4>"
                        f"<table><thead>{head}</thead><tbody>{''.join(body)}</tbody></table>")
        html.append(_files(run_dir, ["real_world_percentiles.csv"]))
    return "".join(html)


def _reconciliation(run_dir: Path, summary: ValidationSummary) -> str:
    c = summary.check("reconciliation")
    if c is None:
        return '<p class="note">This run predates the reconciliation check.</p>'
    html = [f'<h3 id="check-reconciliation">Maturity guarantee three ways {_badge(c.verdict)}</h3>',
            f'<p class="note">{escape(c.rule_text)}</p>']
    g = c.guarantee
    if g is not None:
        html.append(_kv([("product", str(g.product)), ("maturity", f"{fmt.years(g.maturity)} years"),
                         ("guaranteed amount", fmt.plain(g.guaranteed_amount, 6)),
                         ("index level today", fmt.plain(g.index_level, 6))]))
    rows = _records(_csv(run_dir, "reconciliation"))
    if rows:
        values = [r for r in rows if r.get("kind") == "value"]
        diffs = [r for r in rows if r.get("kind") == "difference"]
        html.append(_table(values, [("method", "method"), ("value", "value ± SE")], fmts={
            "method": lambda r: escape(str(r["method"])),
            "value": lambda r: escape(fmt.price_se(r.get("value"), r.get("std_error")))}))
        html.append(_table(diffs, [("comparison", "comparison"), ("difference", "difference ± SE"), ("z_score", "z")],
                           fmts={
            "comparison": lambda r: escape(str(r["comparison"])),
            "difference": lambda r: escape(fmt.price_se(r.get("difference"), r.get("std_error"))),
            "z_score": lambda r: escape(fmt.zscore(r.get("z_score")))}))
    if c.real_world_sample_se is not None:
        html.append(f'<p class="note">Real-world SE: the larger of the sample value '
                    f'({escape(fmt.number(c.real_world_sample_se))}) '
                    "and the value implied by the market-consistent set's second moment.</p>")
    html.append(_files(run_dir, ["reconciliation.csv"]))
    ret = _records(_csv(run_dir, "expected_returns"))
    if ret:
        html.append("<h3>Expected returns by asset, both measures (annualised, continuously compounded)</h3>")
        at = [r for r in ret if any(abs(float(r["horizon"]) - h) < 1e-9 for h in (1.0, 10.0, 30.0, 50.0))]
        html.append(_long_table(ret, at or ret, what="rows", columns=[("description", "asset"), ("horizon", "horizon"),
                                 ("market_consistent", "Q ± SE"), ("real_world", "P ± SE"), ("difference", "P - Q")],
                           fmts={"description": lambda r: escape(str(r["description"])),
                                 "horizon": lambda r: escape(fmt.years(r["horizon"])),
                                 "market_consistent": lambda r: escape(f"{fmt.percent(r['market_consistent'])} ± "
                                                                       f"{fmt.percent(r['market_consistent_se'])}"),
                                 "real_world": lambda r: escape(f"{fmt.percent(r['real_world'])} ± "
                                                                f"{fmt.percent(r['real_world_se'])}"),
                                 "difference": lambda r: escape(fmt.bp_move(r["difference"]))}))
        html.append(_files(run_dir, ["expected_returns.csv"]))
    return "".join(html)


# -- liabilities -------------------------------------------------------------------------------

_LINE_NAME = {"unit_linked_gmmb": "unit-linked with maturity guarantee",
              "participating": "with-profits (participating)",
              "deferred_annuity_gao": "deferred annuity with GAO", "total": "total"}


def _valuation(run_dir: Path) -> ValuationSummary | None:
    path = run_dir / VALUATION_SUMMARY
    return read_valuation_summary(path) if path.is_file() else None


def liability_rows(val: ValuationSummary) -> list[dict[str, Any]]:
    """One row per product line and the total: best estimate, guarantee and TVOG, each with its
    SE (market-consistent values). Used by the sign-off page, the CLI and compare."""
    by: dict[str, dict[str, Any]] = {}
    for line in val.lines:
        if line.level not in ("product", "total"):
            continue
        row = by.setdefault(line.name, {"line": line.name, "label": _LINE_NAME.get(line.name, line.name)})
        if line.quantity == "best_estimate":
            row.update(be=line.market_consistent_value, be_se=line.market_consistent_se,
                       tvog=line.tvog, tvog_se=line.tvog_se, ce=line.certainty_equivalent_value)
        elif line.quantity == "guarantee":
            row.update(guarantee=line.market_consistent_value, guarantee_se=line.market_consistent_se)
    return list(by.values())


def _liabilities(run_dir: Path, val: ValuationSummary | None) -> str:
    if val is None:
        return ('<p class="note">No liability valuation in this run directory. Run '
                "<code>pqflow value RUN_DIR --liabilities FILE</code> and then <code>pqflow report RUN_DIR</code>.</p>")
    rec = val.reconciled
    recorded = rec.verdict if rec is not None else None
    verdict = {"agree": "pass", "differ": "fail"}.get(str(recorded), recorded)
    rule = (f'<p class="note">Rule: {escape(str(rec.rule))}.'
            + (f' Inconclusive: {escape(", ".join(rec.inconclusive_lines))}.'
               if rec.inconclusive_lines else "")
            + "</p>") if rec is not None and rec.rule else ""
    cur = str(_or(val.currency, ""))
    html = [f"<h3>{escape(str(_or(val.insurer, '')))}: best estimate and TVOG {_badge(verdict)}</h3>",
            f'<p class="note">Portfolio {escape(str(_or(val.portfolio_file, "")))}; values in {escape(cur)} '
            f'(whole units) at {escape(str(_or(val.valuation_date, "")))}. Real-world values use the deflator '
            "(density over cash account); the difference from the market-consistent value is shown in "
            "standard errors of the difference.</p>"]
    lines = [dict(line.entry) for line in val.lines if line.level in ("product", "total")]
    money = lambda k, se: (lambda r: escape(fmt.money_se(r.get(k), r.get(se)) if se else fmt.money(r.get(k))))  # noqa: E731
    html.append(_table(lines, [
        ("name", "line"), ("quantity", "quantity"),
        ("market_consistent_value", f"market consistent ± SE ({cur})"),
        ("certainty_equivalent_value", f"certainty equivalent ({cur})"), ("tvog", f"TVOG ({cur})"),
        ("real_world_value", f"real world, deflated ± SE ({cur})"),
        ("difference_in_se", "difference / SE"),
    ], fmts={
        "name": lambda r: escape(_LINE_NAME.get(r["name"], r["name"])),
        "quantity": lambda r: escape(str(r["quantity"]).replace("_", " ")),
        "market_consistent_value": money("market_consistent_value", "market_consistent_se"),
        "certainty_equivalent_value": money("certainty_equivalent_value", None),
        "tvog": money("tvog", None),
        "real_world_value": money("real_world_value", "real_world_se"),
        "difference_in_se": lambda r: escape(fmt.zscore(r.get("difference_in_se"))),
    }))
    if rule:
        html.append(rule)
    html.append('<p class="note">' + " ".join(escape(c) for c in val.conventions) + "</p>")
    html.append(_files(run_dir, ["../valuation/liability_values.csv", "../valuation/liability_cash_flows.csv",
                                 "../valuation/summary.json"]))
    sens = [{"sensitivity": e.sensitivity, "quantity": q, **vars(c)}
            for e in val.sensitivity_totals for q, c in e.changes.items()]
    if sens:
        html.append('<h3>Sensitivities (total)</h3><p class="note">Change from the base on the same scenarios '
                    "(common random numbers), its standard error, and the one independently seeded sets would give "
                    "(plain means; valuation/sensitivities.csv has every line).</p>")
        html.append(_table(sens, [("sensitivity", "sensitivity"), ("quantity", "quantity"), ("value", f"value ({cur})"),
                                  ("change", f"change ({cur})"), ("change_se_paired", "SE"),
                                  ("change_se_independent", "SE, independent sets")],
                           fmts={"quantity": lambda r: escape(str(r["quantity"]).replace("_", " ")),
                                 **{k: _money_cell(k)
                                    for k in ("value", "change", "change_se_paired", "change_se_independent")}}))
        be = [r for r in sens if r["quantity"] == "best_estimate"]
        if be:
            html.append(svg.bar_chart(
                title=f"Change in the total best estimate by sensitivity ({cur}), ± 2 SE (common scenarios)",
                labels=[str(r["sensitivity"]) for r in be],
                values=[float(r.get("change") or 0.0) for r in be],
                errors=[2.0 * float(r.get("change_se_paired") or 0.0) for r in be],
                y_label=cur,
            ))
        html.append(_files(run_dir, ["../valuation/sensitivities.csv"]))
    return "".join(html)


# -- the sign-off page -------------------------------------------------------------------------

def _signoff(run_dir: Path, manifest: ManifestRecord | None, cal: CalibrationRecord, summary: ValidationSummary,
             val: ValuationSummary | None, signoff: SignOff, today: str) -> str:
    html = [_one_line(run_dir, manifest, cal)]
    html.append(f'<p class="verdict-line">Overall verdict {_badge(summary.verdict)}</p>')
    warnings = _warnings(summary, val)
    if warnings:
        html.append('<ul class="warn">' + "".join(f"<li>{escape(w)}</li>" for w in warnings) + "</ul>")
    rows = "".join(
        f'<tr><td class="l"><a href="#check-{escape(n)}">{escape(label)}</a></td><td class="num">{escape(fig)}</td>'
        f"<td>{badge}</td></tr>" for n, label, fig, badge in _verdict_rows(summary))
    verdict_table = ('<table><thead><tr><th class="l">check</th><th>key figure</th><th>verdict</th></tr></thead>'
                     f"<tbody>{rows}</tbody></table>")
    facts = _curve_facts(cal)
    curve_rows = ""
    if facts["zeros"]:
        curve_rows = ('<table><thead><tr><th class="l">maturity</th>' + "".join(
            f"<th>{fmt.years(m)}y</th>" for m in facts["zeros"])
            + '</tr></thead><tbody><tr><td class="l">zero rate</td>'
            + "".join(_cell(escape(fmt.percent(z))) for z in facts["zeros"].values()) + "</tr></tbody></table>")
    curve_text = facts["method"].split(" (")[0]
    if fmt.is_number(facts["ufr"]):
        curve_text += (f"; UFR {fmt.percent(facts['ufr'], 2)} (annual), last liquid point "
                       f"{fmt.years(facts['llp'])}y, alpha {fmt.number(facts['alpha'], 3)}")
    dens = _densities(summary, manifest)
    dens_table = _table(dens, [("density", "density"), ("block", "block"), ("usable", "usable")],
                        fmts={k: _str_cell(k) for k in ("density", "block",
                                                                              "usable")}) if dens else ""
    params = _table(_key_parameters(cal), [("part", "part"), ("values", "parameters"), ("fit", "fit error")],
                    fmts={k: _text_cell(k) for k in ("part", "values", "fit")})
    html.append(f'<div class="cols"><div><h3>Verdicts</h3>{verdict_table}</div>'
                f'<div><h3>Today\'s curve</h3><p class="note">{escape(curve_text)}</p>{curve_rows}'
                f'<h3>Density weights</h3>{dens_table}</div></div>')
    html.append(f"<h3>Calibrated parameters</h3>{params}")
    if val is not None:
        cur = str(_or(val.currency, ""))
        lrows = liability_rows(val)
        html.append(f"<h3>Liabilities, market consistent ({escape(cur)}, ± one standard error)</h3>")
        html.append(_table(lrows, [("label", "line"), ("be", "best estimate"), ("guarantee", "guarantee value"),
                                   ("tvog", "TVOG")], fmts={
            "label": lambda r: escape(r["label"]),
            "be": lambda r: escape(fmt.money_se(r.get("be"), r.get("be_se"))),
            "guarantee": lambda r: escape(fmt.money_se(r.get("guarantee"), r.get("guarantee_se"))),
            "tvog": lambda r: escape(fmt.money_se(r.get("tvog"), r.get("tvog_se")))}))
    else:
        html.append('<p class="note">Liabilities: not valued in this run (<code>pqflow value</code>).</p>')

    def field(name: str) -> str:
        return escape(name) if name else "&nbsp;"

    html.append(
        '<h3>Sign-off</h3><table class="sign"><tbody>'
        f'<tr><th class="l">prepared by</th><td class="l">{field(signoff.prepared_by)}</td>'
        '<th class="l">signature</th><td class="l">&nbsp;</td></tr>'
        f'<tr><th class="l">reviewed by</th><td class="l">{field(signoff.reviewed_by)}</td>'
        '<th class="l">signature</th><td class="l">&nbsp;</td></tr>'
        f'<tr><th class="l">report date</th><td class="l">{escape(today)}</td>'
        '<th class="l">review date</th><td class="l">&nbsp;</td></tr>'
        "</tbody></table>"
    )
    # The sign-off page may be printed or filed alone: it carries the caution at its foot too.
    html.append(_caution_box())
    return '<div class="signoff">' + "".join(html) + "</div>"


# -- the page ---------------------------------------------------------------------------------

def signoff_from_manifest(manifest: ManifestRecord | None, override: SignOff | None = None) -> SignOff:
    """Names from the command line where given, else from the run's ``[signoff]`` table (kept
    in the manifest header), else blank."""
    stored = (manifest.signoff if manifest is not None else None) or {}
    o = override or SignOff()
    return SignOff(prepared_by=o.prepared_by or str(stored.get("prepared_by") or ""),
                   reviewed_by=o.reviewed_by or str(stored.get("reviewed_by") or ""))


def build_report_html(run_dir: str | Path, signoff: SignOff | None = None, *, today: str | None = None) -> str:
    """The report of a run directory as one HTML string (reads the run's files only)."""
    run_dir = Path(run_dir)
    summary_path = run_dir / VALIDATION_SUMMARY
    cal_path = calibration_path(run_dir)
    if not summary_path.is_file() or not cal_path.is_file():
        raise IntegrityError(f"{run_dir}: needs {CALIBRATION_FILE} and validation/summary.json to write a report")
    summary = read_validation_summary(summary_path)
    cal = read_calibration_file(cal_path)
    manifest = read_manifest(run_dir) if (run_dir / MANIFEST).is_file() else None
    val = _valuation(run_dir)
    name = _or(manifest.run_name if manifest is not None else None, run_dir.name)
    today = today or dt.date.today().isoformat()
    sections = {
        "signoff": _signoff(run_dir, manifest, cal, summary, val, signoff_from_manifest(manifest, signoff), today),
        "identity": _identity(run_dir, manifest, cal),
        "verdicts": _verdicts(run_dir, summary, val),
        "curve": _curve_section(cal),
        "calibration": _calibration(cal),
        "scenarios": _scenarios(run_dir),
        "martingale": _martingale(run_dir, summary),
        "density": _density(run_dir, summary, manifest),
        "market-consistency": _market_consistency(run_dir, summary),
        "real-world": _real_world(run_dir, summary),
        "reconciliation": _reconciliation(run_dir, summary),
        "liabilities": _liabilities(run_dir, val),
    }
    nav = "<nav>" + "".join(f'<a href="#{sid}">{escape(title)}</a>' for sid, title in SECTIONS[1:]) + "</nav>"
    body = [f"<h1>pqflow evidence pack: {escape(str(name))}</h1>"]
    for sid, title in SECTIONS:
        if sid == "signoff":
            body.append(f'<section id="signoff"><h2>{escape(title)}</h2>{sections[sid]}</section>{nav}')
        else:
            body.append(f'<section id="{sid}"><h2>{escape(title)}</h2>{sections[sid]}</section>')
    return page(f"pqflow report: {name}", "".join(body))


def write_report(run_dir: str | Path, signoff: SignOff | None = None) -> Path:
    """Write ``validation/report.html`` of a run (atomically) and return its path.

    May be called on a finished run: the report is a derived view outside the manifest, so
    ``pqflow verify`` still passes afterwards.
    """
    run_dir = Path(run_dir)
    return write_html_atomic(run_dir / "validation" / REPORT_NAME, build_report_html(run_dir, signoff))
