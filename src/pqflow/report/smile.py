"""The equity smile on the sign-off page: the Heston fit per quote, and the real-world wealth
ratios of each equity index against the 2005 benchmark.

Small pure functions of the values ``calibration.json`` and the real-world check wrote
(``fit.heston`` and ``validation/wealth_ratio_by_index.csv`` with ``summary.json``'s
``wealth_ratio_benchmark.by_index``); each returns an HTML fragment (empty string when there is
nothing to show). Volatilities are decimals in the files and shown in vol points.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

from pqflow.report import numbers as fmt
from pqflow.storage.calibration_sections import HestonFitRecord, HestonFitRowRecord

__all__ = ["smile_rows", "smile_fit_html", "wealth_ratio_pivot", "wealth_ratio_by_index_html"]

_PARAMETERS = (("v0", "v0 (initial variance)"), ("kappa", "kappa (mean reversion)"),
               ("theta", "theta (long-run variance)"), ("xi", "xi (vol of variance)"),
               ("rho", "rho (index-variance correlation)"))


def _td(text: str, *, left: bool = False) -> str:
    return f'<td class="{"l" if left else "num"}">{text}</td>'


def _table(head: Sequence[str], rows: Sequence[Sequence[str]], *, left: int = 1) -> str:
    """Cells are HTML already; the first ``left`` columns are left-aligned."""
    th = "".join(f'<th class="{"l" if i < left else ""}">{escape(h)}</th>' for i, h in enumerate(head))
    body = "".join("<tr>" + "".join(_td(c, left=i < left) for i, c in enumerate(r)) + "</tr>" for r in rows)
    return f"<table><thead><tr>{th}</tr></thead><tbody>{body}</tbody></table>"


def _float(v: Any) -> float:
    return float(v) if fmt.is_number(v) else math.nan


def smile_rows(quotes: Sequence[HestonFitRowRecord]) -> list[dict[str, Any]]:
    """One index's quotes sorted by expiry and moneyness: expiry, moneyness (K/F), kind, market
    and model vol (decimals) and their difference in vol points (model - market)."""
    rows = []
    for r in quotes:
        market, model = _float(r.market_vol), _float(r.model_vol)
        diff = _float(r.vol_points) if r.vol_points is not None else 100.0 * (model - market)
        rows.append({"expiry": _float(r.expiry), "moneyness": _float(r.moneyness),
                     "kind": r.kind, "market_vol": market, "model_vol": model, "difference": diff})
    return sorted(rows, key=lambda r: (r["expiry"], r["moneyness"]))


def smile_fit_html(heston_fits: Mapping[str, HestonFitRecord] | None) -> str:
    """Per Heston index (``CalibrationRecord.heston_fits``): the fitted parameters with the
    Feller ratio, the RMSE and the largest miss in vol points, and every quote (market vol,
    model vol, difference)."""
    if not heston_fits:
        return ""
    out = []
    for name, fit in heston_fits.items():
        feller = _float(fit.feller_ratio)
        pairs = [(label, fmt.number(getattr(fit, key), 4)) for key, label in _PARAMETERS]
        if not math.isfinite(feller):
            feller_note = ""
        elif feller >= 1.0:
            feller_note = " (at least 1: the variance stays positive)"
        else:
            feller_note = " (below 1: the variance touches 0; the scheme truncates)"
        pairs += [
            ("Feller ratio 2 kappa theta / xi^2", fmt.number(feller, 3) + feller_note),
            ("RMSE (vol points)", fmt.number(fit.rmse_vol_points, 3)),
            ("largest miss (vol points)", fmt.number(fit.max_abs_vol_points, 3)),
        ]
        kv = "<table>" + "".join(f'<tr><th class="l">{escape(k)}</th><td class="l">{escape(v)}</td></tr>'
                                 for k, v in pairs) + "</table>"
        rows = smile_rows(fit.rows)
        body = [[escape(fmt.years(r["expiry"])), escape(fmt.number(r["moneyness"], 3)), escape(r["kind"]),
                 escape(fmt.vol_points(r["market_vol"])), escape(fmt.vol_points(r["model_vol"])),
                 escape(f"{r['difference']:+.2f}" if math.isfinite(r["difference"]) else fmt.DASH)]
                for r in rows]
        table = _table(["expiry (y)", "strike K/F", "option", "market vol", "model vol", "model - market (pts)"],
                       body, left=1)
        out.append(f"<h3>Smile fit: {escape(str(name).replace('_', ' '))} (Heston)</h3>"
                   f'<p class="note">{escape(fit.method)}</p>{kv}{table}')
    return "".join(out)


def wealth_ratio_pivot(rows: Sequence[Mapping[str, Any]]) -> tuple[list[str], list[dict[str, Any]]]:
    """``(indices, cells)``: the indices in file order and one cell per (horizon, percentile)
    with the tail, requirement, benchmark and, per index, ``(model value, met)``."""
    indices: list[str] = []
    cells: dict[tuple[float, float], dict[str, Any]] = {}
    for r in rows:
        index = str(r.get("index"))
        if index not in indices:
            indices.append(index)
        key = (_float(r.get("horizon")), _float(r.get("percentile")))
        cell = cells.setdefault(key, {"horizon": key[0], "percentile": key[1], "tail": str(r.get("tail", "")),
                                      "requirement": str(r.get("requirement", "")),
                                      "benchmark": _float(r.get("benchmark")), "by_index": {}})
        cell["by_index"][index] = (_float(r.get("model")), str(r.get("pass")) in ("True", "true", "1"))
    return indices, [cells[k] for k in sorted(cells)]


def wealth_ratio_by_index_html(rows: Sequence[Mapping[str, Any]], by_index: Mapping[str, Any] | None) -> str:
    """The benchmark's cells with each equity index's model percentile side by side (a missed
    cell in bold), and per index its volatility model and how many cells it meets."""
    if not rows:
        return ""
    by_index = by_index or {}
    indices, cells = wealth_ratio_pivot(rows)

    def label(index: str) -> str:
        model = (by_index.get(index) or {}).get("volatility_model", "")
        return f"{index} ({model})" if model else index

    head = ["horizon (y)", "percentile", "must be", "benchmark", *(label(i) for i in indices)]
    body = []
    for c in cells:
        row = [escape(fmt.years(c["horizon"])), escape(fmt.share(c["percentile"])),
               escape(f"{c['requirement']} ({c['tail']} tail)"), escape(fmt.number(c["benchmark"], 3))]
        for i in indices:
            value, met = c["by_index"].get(i, (math.nan, False))
            text = escape(fmt.number(value, 3))
            row.append(text if met else f"<strong>{text} missed</strong>")
        body.append(row)
    met_rows = []
    for i in indices:
        entry = by_index.get(i) or {}
        met = entry.get("met", sum(1 for c in cells if c["by_index"].get(i, (0, False))[1]))
        total = entry.get("cells", sum(1 for c in cells if i in c["by_index"]))
        met_rows.append(f"{escape(i)} ({escape(str(entry.get('volatility_model', 'n/a')))}): meets "
                        f"{escape(fmt.count(met))} of {escape(fmt.count(total))} cells")
    return ("<h4>Wealth-ratio percentiles by equity index</h4>" + _table(head, body, left=3)
            + '<p class="note">' + "; ".join(met_rows) + ".</p>")
