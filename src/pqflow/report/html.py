"""The run's evidence pack as one self-contained HTML page: ``validation/report.html``.

Everything shown is read from the run's own files (``manifest.json``, ``calibration.json``,
``validation/*.csv``, ``validation/summary.json`` and the scenario parts); nothing is
recomputed from the model. The page has no script, no external reference (plots are inline
SVG drawn by :mod:`pqflow.report.svg`, styles inline) and opens offline. It is a derived view:
the manifest neither lists nor checks it (:data:`pqflow.storage.manifest.DERIVED_VIEWS`), so it
may be written, or rewritten, after the run was published. It is written atomically.
"""

from __future__ import annotations

import math
import os
from html import escape
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from pqflow import CAUTION, __version__
from pqflow.errors import IntegrityError
from pqflow.report import svg
from pqflow.storage.jsonio import read_json
from pqflow.validation.martingale import bond_maturity_of
from pqflow.validation.reader import ScenarioSetReader
from pqflow.validation.run_files import gather_at_times

__all__ = ["write_report", "build_report_html", "REPORT_NAME", "SECTIONS", "write_html_atomic", "page"]

REPORT_NAME = "report.html"
SECTIONS = (
    ("identity", "Run identity"),
    ("verdicts", "Verdicts"),
    ("calibration", "Calibration"),
    ("scenarios", "Scenario fan charts"),
    ("martingale", "Martingale test"),
    ("density", "Density weights"),
    ("market-consistency", "Market consistency"),
    ("real-world", "Real-world checks"),
    ("reconciliation", "Reconciliation"),
    ("liabilities", "Liability valuation"),
)
MEASURES = ("market_consistent", "real_world")
_FAN_POINTS = 120  # at most this many output times per fan chart (a long monthly grid is thinned)
MEASURE_NAME = {"market_consistent": "market consistent (Q)", "real_world": "real world (P)"}

CSS = """
body{font:14px/1.45 system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d1d1f;margin:0;background:#f6f6f4}
main{max-width:1100px;margin:0 auto;padding:16px 24px 40px}
h1{font-size:24px;margin:8px 0 4px}h2{font-size:19px;border-bottom:2px solid #1f5f8b;padding-bottom:4px;margin-top:34px}
h3{font-size:15px;margin:18px 0 6px}
.caution{background:#fff6d6;border:1px solid #d9b441;border-left:6px solid #d9b441;padding:10px 14px;margin:12px 0}
table{border-collapse:collapse;margin:6px 0 12px;background:#fff;font-size:12.5px}
th,td{border:1px solid #ddd;padding:3px 8px;text-align:right;vertical-align:top}
th{background:#eef2f5;text-align:center}td.l,th.l{text-align:left}
.badge{display:inline-block;min-width:64px;text-align:center;border-radius:10px;padding:1px 9px;
font:bold 11px/18px sans-serif;letter-spacing:.05em;text-transform:uppercase;color:#fff}
.badge.pass{background:#2e7d32}.badge.fail{background:#c62828}.badge.na{background:#8a8a8a}
.badge.info{background:#1f5f8b}.badge.warn{background:#b26a00}
.grid{display:grid;grid-template-columns:repeat(auto-fill,minmax(480px,1fr));gap:10px}
.chart{background:#fff;border:1px solid #e3e3e3}
.note{color:#555;font-size:12.5px}ul.warn li{color:#8a4b00}
nav a{margin-right:12px}
"""


# -- small HTML helpers -------------------------------------------------------------------

def _badge(verdict: str | None, counts: bool = True) -> str:
    v = (verdict or "not_applicable").lower()
    cls = {"pass": "pass", "fail": "fail"}.get(v, "na")
    text = {"pass": "pass", "fail": "fail"}.get(v, "n/a")
    extra = "" if counts else ' <span class="badge info" title="reported; not part of the run verdict">reported</span>'
    return f'<span class="badge {cls}">{text}</span>{extra}'


def _num(v: Any, digits: int = 4) -> str:
    if v is None:
        return "–"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}"
    try:
        x = float(v)
    except (TypeError, ValueError):
        return escape(str(v))
    if not math.isfinite(x):
        return "–"
    if x == 0:
        return "0"
    if abs(x) >= 1e5 or abs(x) < 1e-4:
        return f"{x:.{digits}e}"
    return f"{x:.{digits}g}" if abs(x) < 1 else f"{x:,.{max(digits - 2, 2)}f}"


def _pct(v: Any) -> str:
    return "–" if v is None or not math.isfinite(float(v)) else f"{100 * float(v):.3f}%"


def _table(rows: list[dict[str, Any]], columns: list[tuple[str, str]], *, fmt: dict[str, Any] | None = None) -> str:
    """``columns``: (key, header); ``fmt``: key -> formatter (default :func:`_num`)."""
    fmt = fmt or {}
    head = "".join(f'<th class="{"l" if i == 0 else ""}">{escape(h)}</th>' for i, (_, h) in enumerate(columns))
    body = []
    for r in rows:
        cells = []
        for i, (k, _) in enumerate(columns):
            v = r.get(k)
            f = fmt.get(k)
            text = f(v) if f else (escape(str(v)) if isinstance(v, str) else _num(v))
            cells.append(f'<td class="{"l" if i == 0 or isinstance(v, str) else ""}">{text}</td>')
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _kv(pairs: list[tuple[str, Any]]) -> str:
    return "<table>" + "".join(
        f'<tr><th class="l">{escape(k)}</th><td class="l">{_num(v) if not isinstance(v, str) else escape(v)}</td></tr>'
        for k, v in pairs) + "</table>"


def _csv(run_dir: Path, name: str) -> pd.DataFrame | None:
    path = run_dir / "validation" / f"{name}.csv"
    return pd.read_csv(path) if path.is_file() else None


def _records(frame: pd.DataFrame | None) -> list[dict[str, Any]]:
    if frame is None:
        return []
    return [{k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in r.items()}
            for r in frame.to_dict(orient="records")]


def page(title: str, body: str) -> str:
    """A whole self-contained page with the caution at the top and the bottom."""
    caution = f'<div class="caution"><strong>Caution.</strong> {escape(CAUTION)}</div>'
    return (
        "<!DOCTYPE html><html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{escape(title)}</title>"
        f"<style>{CSS}</style></head><body><main>"
        f'<section id="caution-top">{caution}</section>'
        f"{body}"
        f'<section id="caution-bottom">{caution}</section>'
        f'<p class="note">Generated by pqflow {escape(__version__)}.</p>'
        "</main></body></html>\n"
    )


def write_html_atomic(path: str | Path, html: str) -> Path:
    """Write ``html`` to ``path`` through a temporary name in the same folder, then rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write(html)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    return path


# -- sections -------------------------------------------------------------------------------

def _per_set(value: Any) -> str:
    """``{"real_world": 2000, ...}`` as "real world 2,000 · market consistent 2,000"."""
    if isinstance(value, dict):
        return " · ".join(f"{m.replace('_', ' ')} {v:,}" if isinstance(v, int) else f"{m.replace('_', ' ')} {v:g}"
                          for m, v in value.items())
    return "–" if value is None else f"{value:,}" if isinstance(value, int) else str(value)


def _identity(run_dir: Path, manifest: dict[str, Any] | None, cal: dict[str, Any]) -> str:
    if manifest is None:
        pairs: list[tuple[str, Any]] = [
            ("manifest", "not written yet: identity from calibration.json only"),
            ("valuation date", cal.get("valuation_date", "–")),
        ]
    else:
        seeds = manifest.get("seeds", {})
        pairs = [
            ("run name", manifest.get("run_name", "–")),
            ("run id", manifest.get("run_id", "–")),
            ("valuation date", manifest.get("valuation_date", "–")),
            ("created (UTC)", manifest.get("created_utc", "–")),
            ("configuration sha256", manifest.get("config_sha256", "–")),
            ("root seed", str(seeds.get("root_seed", "–"))),
            ("seed scheme", seeds.get("scheme", "–")),
            ("scenarios per set", _per_set(manifest.get("scenarios"))),
            ("output times", _per_set(manifest.get("output_times"))),
            ("horizon (years)", _per_set(manifest.get("horizon_years"))),
            ("antithetic", "yes" if manifest.get("antithetic") else "no"),
            ("versions", f"pqflow {manifest.get('pqflow_version', '?')}, Python {manifest.get('python', '?')}, "
                         f"numpy {manifest.get('numpy', '?')}, pyarrow {manifest.get('pyarrow', '?')}"),
            ("files in manifest", len(manifest.get("files", []))),
        ]
    pairs.append(("calibration inputs sha256", cal.get("inputs_sha256", "–")))
    return _kv(pairs)


def _verdicts(summary: dict[str, Any]) -> str:
    rows = []
    for name, c in summary.get("checks", {}).items():
        counts = c.get("counts_toward_verdict", True)
        rows.append(
            f'<tr><td class="l"><a href="#check-{escape(name)}">{escape(name.replace("_", " "))}</a></td>'
            f'<td class="l">{escape(str(c.get("kind", "")))}</td><td>{_num(c.get("cells"))}</td>'
            f'<td>{_num(c.get("max_abs_z"), 3)} / {_num(c.get("family_critical_z"), 3)}</td>'
            f"<td>{_badge(c.get('verdict'), counts)}</td></tr>"
        )
        bench = c.get("wealth_ratio_benchmark")
        if isinstance(bench, dict):
            rows.append(
                f'<tr><td class="l">&nbsp;&nbsp;wealth-ratio benchmark</td><td class="l">'
                f'{escape(str(bench.get("source", "")))}</td><td>{_num(bench.get("comparisons"))}</td>'
                f'<td>{_num(bench.get("failed"))} missed</td>'
                f'<td>{_badge(bench.get("verdict"), bench.get("counts_toward_verdict", False))}</td></tr>'
            )
    warnings = [w for c in summary.get("checks", {}).values() for w in c.get("warnings", []) or []]
    warn_html = ("<h3>Warnings</h3><ul class=\"warn\">" + "".join(f"<li>{escape(w)}</li>" for w in warnings)
                 + "</ul>") if warnings else ""
    return (
        f"<p>Overall verdict: {_badge(summary.get('verdict'))}</p>"
        f"<p class=\"note\">{escape(str(summary.get('rule', '')))}</p>"
        "<table><thead><tr><th class=\"l\">check</th><th class=\"l\">what it tests</th><th>cells</th>"
        "<th>max |z| / limit</th><th>verdict</th></tr></thead><tbody>" + "".join(rows) + "</tbody></table>"
        + warn_html
    )


def _schedule_text(v: Any, fmt=_num) -> str:
    if isinstance(v, dict) and "knots" in v:
        vals = v.get("values", [])
        if len(vals) <= 8:
            return ", ".join(f"from {k:g}y: {fmt(x)}" for k, x in zip(v["knots"], vals))
        return f"{len(vals)} pieces, from {fmt(min(vals))} to {fmt(max(vals))} (first {fmt(vals[0])}, last {fmt(vals[-1])})"
    return fmt(v)


def _calibration(cal: dict[str, Any]) -> tuple[str, list[str]]:
    par = cal.get("parameters", {})
    hw, eq = par.get("hull_white", {}), par.get("equity", {})
    mpr = par.get("market_prices_of_risk", {})
    curve = par.get("curve", {})
    if "g2pp" in par:
        g = par["g2pp"]
        rates_pairs = [("rates model", "G2++ (two factors)"), ("G2++ a, sigma (rates_x)", f"{g['a']:.6g}, {g['sigma']:.6g}"),
                       ("G2++ b, eta (rates_y)", f"{g['b']:.6g}, {g['eta']:.6g}"), ("G2++ rho", g["rho"])]
    else:
        rates_pairs = [("Hull-White mean reversion a", hw.get("mean_reversion")),
                       ("Hull-White volatility sigma", hw.get("volatility"))]
    pairs = [
        ("curve", curve.get("description", curve.get("interpolation", curve.get("kind", "–")))),
        *rates_pairs,
        ("equity index", eq.get("name", "–")),
        ("equity level", eq.get("level")),
        ("dividend yield", eq.get("dividend_yield")),
        ("equity volatility", _schedule_text(eq.get("volatility"))),
        ("equity / short-rate correlation", eq.get("correlation_with_rates")),
        ("price of risk, rates", _schedule_text(mpr.get("rates"))),
        ("price of risk, equity", _schedule_text(mpr.get("equity"))),
    ]
    rw = cal.get("inputs", {}).get("real_world", {})
    if "equity_risk_premium" in rw:
        pairs.append(("equity risk premium (input)", rw.get("equity_risk_premium")))
    for item in par.get("indices", []):
        pairs.append((f"{item['kind']} index {item['name']}: level, income yield, risk premium",
                      f"{item['level']:g}, {item['income_yield']:.4g}, {item['risk_premium']:.4g}"))
        pairs.append((f"{item['name']} volatility", _schedule_text(item.get("volatility"))))
    if "inflation" in par:
        inf = par["inflation"]
        pairs.append(("inflation (Jarrow-Yildirim): a_r, sigma_r, sigma_I",
                      f"{inf['real_mean_reversion']:g}, {inf['real_volatility']:g}, {inf['inflation_volatility']:g}"))
        pairs.append(("CPI at time 0; real bonds written", f"{inf['cpi_base']:g}; {inf['real_bond_maturities']}"))
    for r in (par.get("credit") or {}).get("ratings", []):
        c = r["cir"]
        pairs.append((f"credit {r['name']}: recovery, CIR (kappa, mu, nu, y0), theta",
                      f"{r['recovery']:g}, ({c['mean_reversion']:.4g}, {c['long_run_mean']:.4g}, {c['volatility']:.4g}, "
                      f"{c['initial']:.4g}), {r['price_of_risk']:g}"))
    if "driver_correlation" in par:
        dc = par["driver_correlation"]
        pairs.append(("drivers (correlation matrix in calibration.json)", ", ".join(dc["drivers"])))
    html = ["<h3>Parameters</h3>", _kv(pairs)]
    charts: list[str] = []
    fits: list[tuple[str, Any]] = []
    for name, fit in (cal.get("fit") or {}).items():
        if name == "indices" and isinstance(fit, dict):
            fits += [(f"index {k}", v) for k, v in fit.items()]
        elif name == "credit" and isinstance(fit, dict):
            fits.append(("credit", {k: v for k, v in fit.items() if k != "ratings"}))
            fits += [(f"credit {r.get('rating')}", r) for r in fit.get("ratings", [])]
        else:
            fits.append((name, fit))
    for name, fit in fits:
        if not isinstance(fit, dict):
            continue
        html.append(f"<h3>Fit: {escape(name.replace('_', ' '))}</h3>")
        scalars = [(k, v if not isinstance(v, (list, dict)) else ", ".join(map(str, v)) if isinstance(v, list) and len(v) <= 12 else None)
                   for k, v in fit.items() if k != "rows"]
        html.append(_kv([(k.replace("_", " "), v if v is not None else "(see file)") for k, v in scalars]))
        rows = fit.get("rows")
        if isinstance(rows, list) and rows and isinstance(rows[0], dict):
            cols = [(k, k.replace("_", " ")) for k in rows[0].keys()]
            html.append(_table(rows, cols))
            if "vol_difference_bp" in rows[0]:
                labels = [f"{r.get('expiry', 0):g}x{r.get('tenor', 0):g}" for r in rows]
                charts.append(svg.bar_chart(
                    title=f"Calibration fit, {name.replace('_', ' ')}: model - market vol (bp)",
                    labels=labels, values=[r["vol_difference_bp"] for r in rows], y_label="bp of vol"))
            elif "vol_error" in rows[0]:
                labels = [f"{r.get('expiry', 0):g}y" for r in rows]
                charts.append(svg.bar_chart(
                    title=f"Calibration fit, {name.replace('_', ' ')}: model - market vol (bp of vol)",
                    labels=labels, values=[1e4 * float(r["vol_error"]) for r in rows], y_label="bp of vol"))
    if not cal.get("fit"):
        html.append('<p class="note">No fit record in calibration.json (parameters typed in).</p>')
    if charts:
        html.append('<div class="grid">' + "".join(charts) + "</div>")
    return "".join(html), charts


def _fan_data(run_dir: Path) -> dict[str, dict[str, Any]]:
    out: dict[str, dict[str, Any]] = {}
    for measure in MEASURES:
        reader = ScenarioSetReader(run_dir=run_dir, measure=measure)
        names = reader.column_names()
        bonds = sorted((bond_maturity_of(c), c) for c in names if bond_maturity_of(c) is not None)
        equity = [c for c in names if c.startswith("equity_")]
        cols = ["short_rate", *([bonds[-1][1]] if bonds else []), *equity[:1]]
        grid, _ = next(reader.iter_arrays(["short_rate"]))
        keep = np.unique(np.r_[np.arange(0, grid.size, max(1, -(-grid.size // _FAN_POINTS))), grid.size - 1])
        times, data = gather_at_times(reader, cols, grid[keep].tolist())
        pcts = (1, 5, 25, 50, 75, 95, 99)
        item: dict[str, Any] = {"times": times.tolist(), "quantities": {}}

        def q(values: np.ndarray) -> dict[float, list[float]]:
            return {p: v.tolist() for p, v in zip(pcts, np.percentile(values, pcts, axis=0))}

        item["quantities"]["short rate"] = q(data["short_rate"])
        if bonds:
            m, c = bonds[-1]
            item["quantities"][f"{m:g}-year zero yield"] = q(-np.log(data[c]) / m)
        if equity:
            item["quantities"][f"{equity[0]} (total return)"] = q(data[equity[0]])
        out[measure] = item
    return out


def _scenarios(run_dir: Path) -> str:
    data = _fan_data(run_dir)
    charts = []
    names = list(next(iter(data.values()))["quantities"])
    for qname in names:
        for i, measure in enumerate(MEASURES):
            item = data[measure]
            is_rate = "rate" in qname or "yield" in qname
            charts.append(svg.fan_chart(
                title=f"{qname}, {MEASURE_NAME[measure]}", times=item["times"],
                percentiles=item["quantities"][qname], colour=svg.PALETTE[i],
                y_label="continuously compounded" if is_rate else "index level (log scale)",
                y_format=(lambda v: f"{100 * v:.1f}%") if is_rate else svg._fmt_default,
                log_y=not is_rate,
            ))
    return ('<p class="note">Percentile bands 1-99%, 5-95%, 25-75% and the median at each output '
            "time, each set under its own measure (unweighted).</p>"
            '<div class="grid">' + "".join(charts) + "</div>")


def _martingale(run_dir: Path, summary: dict[str, Any]) -> str:
    table = _csv(run_dir, "martingale")
    html = []
    for measure in MEASURES:
        c = summary.get("checks", {}).get(f"martingale_{measure}", {})
        html.append(f'<h3 id="check-martingale_{measure}">{escape(MEASURE_NAME[measure])} '
                    f"{_badge(c.get('verdict'))}</h3>")
        html.append(_kv([
            ("cells", c.get("cells")), ("outside 95% / by chance", f"{c.get('outside_95')} / {_num(c.get('expected_outside_95_by_chance'), 3)}"),
            ("outside 99% / by chance", f"{c.get('outside_99')} / {_num(c.get('expected_outside_99_by_chance'), 3)}"),
            ("max |z| / family limit", f"{_num(c.get('max_abs_z'), 3)} / {_num(c.get('family_critical_z'), 3)}"),
            ("worst cell", ", ".join(f"{k} {v}" for k, v in (c.get("worst_cell") or {}).items())),
        ]))
        if table is None:
            continue
        t = table[table["measure"] == measure]
        assets = list(dict.fromkeys(t["asset"]))
        bonds = sorted((bond_maturity_of(a), a) for a in assets if bond_maturity_of(a) is not None)
        chosen = ["deflator", *[a for a in assets if a.startswith(("equity_", "property_"))]]
        chosen += [b for _, b in bonds[:1]] + ([b for _, b in bonds[-1:]] if len(bonds) > 1 else [])
        chosen += [a for a in assets if a == "cpi"] + [a for a in assets if a.startswith("real_zcb_")][-1:]
        longest_by_rating: dict[str, str] = {}
        for a in assets:  # dzcb_{rating}_{m}y, in maturity order: keep the longest per rating
            if a.startswith("dzcb_"):
                longest_by_rating[a[len("dzcb_"):].rsplit("_", 1)[0]] = a
        chosen += list(longest_by_rating.values())
        z = float(c.get("family_critical_z", 2.58) or 2.58)
        charts = []
        for a in chosen:
            s = t[t["asset"] == a]
            x = s["time"].to_numpy()
            r = s["ratio"].to_numpy()
            se = s["ratio_std_error"].to_numpy()
            charts.append(svg.line_chart(
                title=f"{a}: mean deflated / today's price, {MEASURE_NAME[measure]}",
                series=[svg.Series(label="ratio", x=x, y=r, colour=svg.PALETTE[0])],
                bands=[svg.Band(label=f"1 +- {z:.2f} SE", x=x, lower=1 - z * se, upper=1 + z * se,
                                colour=svg.PALETTE[2], opacity=0.25)],
                hlines=[(1.0, "1")], y_label="ratio",
            ))
        html.append('<div class="grid">' + "".join(charts) + "</div>")
    return "".join(html)


def _density(run_dir: Path, summary: dict[str, Any]) -> str:
    table = _csv(run_dir, "density")
    html = []
    share = None
    for measure in MEASURES:
        c = summary.get("checks", {}).get(f"density_{measure}", {})
        share = c.get("ess_warning_share", share)
        col = "q_density (dQ/dP)" if measure == "real_world" else "p_density (dP/dQ)"
        html.append(f'<h3 id="check-density_{measure}">{escape(MEASURE_NAME[measure])}: {col} '
                    f"{_badge(c.get('verdict'))}</h3>")
        at = c.get("at_horizon") or {}
        html.append(_kv([
            ("max |z| of the mean weight / family limit", f"{_num(c.get('max_abs_z'), 3)} / {_num(c.get('family_critical_z'), 3)}"),
            ("lowest ESS share", c.get("min_ess_share")),
            ("largest single-path weight share", c.get("max_weight_share")),
            ("ESS below warning share from", "never" if c.get("ess_below_warning_from_time") is None
             else f"t = {c['ess_below_warning_from_time']:g} years"),
            ("at the horizon: mean weight +- se", f"{_num(at.get('mean_weight'))} +- {_num(at.get('std_error'), 3)}"),
        ]))
    if table is not None:
        series_ess, series_w, bands_w = [], [], []
        for i, measure in enumerate(MEASURES):
            t = table[(table["measure"] == measure) & (table["time"] > 0)]
            x = t["time"].to_numpy()
            series_ess.append(svg.Series(label=MEASURE_NAME[measure], x=x, y=t["ess_share"].to_numpy(),
                                         colour=svg.PALETTE[i]))
            c = summary.get("checks", {}).get(f"density_{measure}", {})
            z = float(c.get("family_critical_z", 2.58) or 2.58)
            se = t["std_error"].to_numpy()
            series_w.append(svg.Series(label=MEASURE_NAME[measure], x=x, y=t["mean_weight"].to_numpy(),
                                       colour=svg.PALETTE[i]))
            bands_w.append(svg.Band(label="", x=x, lower=1 - z * se, upper=1 + z * se, colour=svg.PALETTE[i],
                                    opacity=0.15))
        hl = [(float(share), f"warning share {float(share):.0%}")] if share is not None else []
        charts = [
            svg.line_chart(title="Effective sample size share by time", series=series_ess, hlines=hl,
                           y_label="ESS / paths"),
            svg.line_chart(title="Mean density weight by time (bands: 1 +- z SE)", series=series_w,
                           bands=bands_w, hlines=[(1.0, "1")], y_label="mean weight"),
        ]
        html.append('<div class="grid">' + "".join(charts) + "</div>")
    return "".join(html)


def _market_consistency(run_dir: Path, summary: dict[str, Any]) -> str:
    c = summary.get("checks", {}).get("market_consistency")
    if c is None:
        return '<p class="note">This run predates the market-consistency check.</p>'
    html = [f'<h3 id="check-market_consistency">Calibration instruments repriced from the files '
            f"{_badge(c.get('verdict'))}</h3>", f'<p class="note">{escape(str(c.get("rule", "")))}</p>']
    for u in c.get("not_testable", []) or []:
        html.append(f'<p class="note">{escape(u["instrument"])}: {escape(u["reason"])}</p>')
    rows = _records(_csv(run_dir, "market_consistency"))
    if rows:
        html.append(_table(rows, [
            ("instrument", "instrument"), ("measure", "set"), ("mc_price", "MC price"),
            ("std_error", "SE"), ("market_price", "market price"), ("model_price", "model price"),
            ("market_vol", "market vol"), ("mc_implied_vol", "MC implied vol"),
            ("vol_difference_bp", "MC - market (bp vol)"), ("vol_std_error_bp", "SE (bp vol)"),
            ("z_score", "z beyond tolerance"), ("z_model", "z vs model"),
        ]))
        charts = []
        for i, measure in enumerate(MEASURES):
            sub = [r for r in rows if r["measure"] == measure and r.get("vol_difference_bp") is not None]
            if not sub:
                continue
            labels = [r["instrument"].replace("swaption ", "").split(" K=")[0] for r in sub]
            charts.append(svg.bar_chart(
                title=f"MC implied - market vol, {MEASURE_NAME[measure]} (bp; whiskers 2 SE; band: tolerance)",
                labels=labels, values=[r["vol_difference_bp"] for r in sub],
                errors=[2 * (r.get("vol_std_error_bp") or 0.0) for r in sub], y_label="bp of vol",
                tolerance=float(sub[0].get("vol_tolerance_bp") or 0.0) if len({r.get("convention") for r in sub}) == 1 else None,
                colour=svg.PALETTE[i],
            ))
        html.append('<div class="grid">' + "".join(charts) + "</div>")
    return "".join(html)


def _real_world(run_dir: Path, summary: dict[str, Any]) -> str:
    c = summary.get("checks", {}).get("real_world")
    if c is None:
        return '<p class="note">This run predates the real-world check.</p>'
    html = [f'<h3 id="check-real_world">Targets {_badge(c.get("verdict"))}</h3>',
            f'<p class="note">{escape(str(c.get("rule", "")))}</p>']
    fit = c.get("house_view_fit")
    if fit:
        html.append(f'<p class="note">House view ({escape(str(fit.get("quantity")))}): the model\'s real-world '
                    f'expectation lies within {fit["max_abs_gap_bp"]:.3g} bp of the house-view path.</p>')
    targets = _csv(run_dir, "real_world_targets")
    charts = []
    if targets is not None and len(targets):
        for i, (name, t) in enumerate(targets.groupby("target", sort=False)):
            x = t["time"].to_numpy()
            se = t["std_error"].to_numpy()
            z = float(c.get("family_critical_z", 2.58) or 2.58)
            est = t["estimate"].to_numpy()
            is_rate = True
            charts.append(svg.line_chart(
                title=f"{name}: simulated (band +- {z:.2f} SE) vs target", y_label="rate",
                series=[svg.Series(label="simulated", x=x, y=est, colour=svg.PALETTE[1]),
                        svg.Series(label="target", x=x, y=t["expected"].to_numpy(), colour="#222", dashed=True)],
                bands=[svg.Band(label="", x=x, lower=est - z * se, upper=est + z * se, colour=svg.PALETTE[1])],
                y_format=(lambda v: f"{100 * v:.2f}%") if is_rate else svg._fmt_default,
            ))
        sample = targets.groupby("target", sort=False).head(12)
        html.append(_table(_records(sample), [
            ("target", "target"), ("time", "t"), ("expected", "target value"), ("estimate", "simulated"),
            ("std_error", "SE"), ("z_score", "z")]))
        html.append('<p class="note">First rows per target shown; every row is in validation/real_world_targets.csv.</p>')
    if charts:
        html.append('<div class="grid">' + "".join(charts) + "</div>")
    bench = c.get("wealth_ratio_benchmark") or {}
    html.append(f"<h3>Equity gross wealth ratios against the 2005 benchmark "
                f"{_badge(bench.get('verdict'), bench.get('counts_toward_verdict', False))}</h3>")
    html.append(f'<p class="note">{escape(str(bench.get("source", "")))}; {escape(str(bench.get("rule", "")))}. '
                "The table's numbers are taken from the project's field notes, written there from memory.</p>")
    b_rows = _records(_csv(run_dir, "wealth_ratio_benchmark"))
    if b_rows:
        for r in b_rows:
            r["ok"] = _badge("pass" if str(r.get("pass")) in ("True", "true", "1") else "fail")
        html.append(_table(b_rows, [("horizon", "horizon (y)"), ("percentile", "percentile"), ("tail", "tail"),
                                    ("model", "model"), ("requirement", "must be"), ("benchmark", "benchmark"),
                                    ("ok", "result")], fmt={"ok": lambda v: v}))
    stats = _records(_csv(run_dir, "real_world_statistics"))
    if stats:
        html.append("<h3>Moments (pooled annual steps; reported)</h3>")
        html.append(_table(stats, [("statistic", "statistic"), ("measure", "set"), ("value", "value")]))
    pct = _records(_csv(run_dir, "real_world_percentiles"))
    if pct:
        html.append("<h3>Percentiles at chosen horizons (reported)</h3>")
        cols = [("quantity", "quantity"), ("measure", "set"), ("horizon", "horizon"), ("mean", "mean")]
        cols += [(k, k.replace("p", "") + "%") for k in pct[0] if k.startswith("p") and k[1:].replace(".", "").isdigit()]
        html.append(_table(pct, cols))
    return "".join(html)


def _reconciliation(run_dir: Path, summary: dict[str, Any]) -> str:
    c = summary.get("checks", {}).get("reconciliation")
    if c is None:
        return '<p class="note">This run predates the reconciliation check.</p>'
    html = [f'<h3 id="check-reconciliation">Maturity guarantee three ways {_badge(c.get("verdict"))}</h3>',
            f'<p class="note">{escape(str(c.get("rule", "")))}</p>']
    g = c.get("guarantee") or {}
    v = c.get("values") or {}
    if g:
        html.append(_kv([("product", g.get("product", "")), ("maturity (years)", g.get("maturity")),
                         ("guaranteed amount", g.get("guaranteed_amount")), ("index level today", g.get("index_level"))]))
    rows = _records(_csv(run_dir, "reconciliation"))
    if rows:
        values = [r for r in rows if r.get("kind") == "value"]
        diffs = [r for r in rows if r.get("kind") == "difference"]
        html.append(_table(values, [("method", "method"), ("value", "value"), ("std_error", "SE")]))
        html.append(_table(diffs, [("comparison", "comparison"), ("difference", "difference"),
                                   ("std_error", "SE"), ("z_score", "z")]))
    if v.get("real_world_sample_se") is not None:
        html.append(f'<p class="note">Real-world SE: the larger of the sample value ({_num(v["real_world_sample_se"])}) '
                    "and the value implied by the market-consistent set's second moment.</p>")
    ret = _records(_csv(run_dir, "expected_returns"))
    if ret:
        html.append("<h3>Expected returns by asset, both measures (annualised, continuously compounded)</h3>")
        html.append(_table(ret, [("description", "asset"), ("horizon", "horizon"),
                                 ("market_consistent", "Q"), ("market_consistent_se", "SE"),
                                 ("real_world", "P"), ("real_world_se", "SE"), ("difference", "P - Q")],
                           fmt={k: _pct for k in ("market_consistent", "market_consistent_se", "real_world",
                                                  "real_world_se", "difference")}))
    return "".join(html)


def _liabilities(run_dir: Path) -> str:
    path = run_dir / "valuation" / "summary.json"
    if not path.is_file():
        return ('<p class="note">No liability valuation in this run directory. Run '
                "<code>pqflow value RUN_DIR --liabilities FILE</code> and then <code>pqflow report RUN_DIR</code>.</p>")
    val = read_json(path)
    rec = val.get("reconciliation", {})
    verdict = {"agree": "pass", "differ": "fail"}.get(str(rec.get("verdict")), rec.get("verdict"))
    html = [f"<h3>{escape(str(val.get('insurer', '')))}: best estimate and TVOG {_badge(verdict)}</h3>",
            f'<p class="note">Portfolio {escape(str(val.get("portfolio_file", "")))}; values in '
            f'{escape(str(val.get("currency", "")))} at {escape(str(val.get("valuation_date", "")))}. '
            "Real-world values use the deflator (density over cash account); the difference from the "
            "market-consistent value is shown in standard errors of the difference.</p>"]
    lines = [line for line in val.get("lines", []) if line.get("level") in ("product", "total")]
    html.append(_table(lines, [
        ("name", "line"), ("quantity", "quantity"),
        ("market_consistent_value", "market consistent"), ("market_consistent_se", "SE"),
        ("certainty_equivalent_value", "certainty equivalent"), ("tvog", "TVOG"),
        ("real_world_value", "real world, deflated"), ("real_world_se", "SE"),
        ("difference_in_se", "difference / SE"),
    ], fmt={k: (lambda x: _num(x, 0)) for k in ("market_consistent_value", "market_consistent_se",
                                                  "certainty_equivalent_value", "tvog",
                                                  "real_world_value", "real_world_se")}))
    sens = [{"sensitivity": e["sensitivity"], "quantity": q, **e[q]}
            for e in val.get("sensitivities", []) for q in ("best_estimate", "guarantee", "tvog") if q in e]
    if sens:
        html.append('<h3>Sensitivities (total)</h3><p class="note">Change from the base on the same scenarios '
                    "(common random numbers), its standard error, and the one independently seeded sets would give "
                    "(valuation/sensitivities.csv has every line).</p>")
        html.append(_table(sens, [("sensitivity", "sensitivity"), ("quantity", "quantity"), ("value", "value"),
                                  ("change", "change"), ("change_se_paired", "SE"),
                                  ("change_se_independent", "SE, independent sets")],
                           fmt={k: (lambda x: _num(x, 0)) for k in ("value", "change", "change_se_paired",
                                                                      "change_se_independent")}))
    return "".join(html)


# -- the page ---------------------------------------------------------------------------------

def build_report_html(run_dir: str | Path) -> str:
    """The report of a run directory as one HTML string (reads the run's files only)."""
    run_dir = Path(run_dir)
    summary_path = run_dir / "validation" / "summary.json"
    cal_path = run_dir / "calibration.json"
    if not summary_path.is_file() or not cal_path.is_file():
        raise IntegrityError(f"{run_dir}: needs calibration.json and validation/summary.json to write a report")
    summary = read_json(summary_path)
    cal = read_json(cal_path)
    manifest_path = run_dir / "manifest.json"
    manifest = read_json(manifest_path) if manifest_path.is_file() else None
    name = (manifest or {}).get("run_name", run_dir.name)
    calibration_html, _ = _calibration(cal)
    sections = {
        "identity": _identity(run_dir, manifest, cal),
        "verdicts": _verdicts(summary),
        "calibration": calibration_html,
        "scenarios": _scenarios(run_dir),
        "martingale": _martingale(run_dir, summary),
        "density": _density(run_dir, summary),
        "market-consistency": _market_consistency(run_dir, summary),
        "real-world": _real_world(run_dir, summary),
        "reconciliation": _reconciliation(run_dir, summary),
        "liabilities": _liabilities(run_dir),
    }
    nav = "<nav>" + "".join(f'<a href="#{sid}">{escape(title)}</a>' for sid, title in SECTIONS) + "</nav>"
    body = [f"<h1>pqflow evidence pack: {escape(str(name))}</h1>",
            f"<p>Valuation date {escape(str(cal.get('valuation_date', '–')))} · overall verdict "
            f"{_badge(summary.get('verdict'))}</p>", nav]
    for sid, title in SECTIONS:
        body.append(f'<section id="{sid}"><h2>{escape(title)}</h2>{sections[sid]}</section>')
    return page(f"pqflow report: {name}", "".join(body))


def write_report(run_dir: str | Path) -> Path:
    """Write ``validation/report.html`` of a run (atomically) and return its path.

    May be called on a finished run: the report is a derived view outside the manifest, so
    ``pqflow verify`` still passes afterwards.
    """
    run_dir = Path(run_dir)
    return write_html_atomic(run_dir / "validation" / REPORT_NAME, build_report_html(run_dir))
