"""Small inline-SVG charts for the HTML report: fan charts, lines with bands, bars.

No plotting library and no external reference: each function returns one ``<svg>`` element as
a string, sized by its ``viewBox`` so it scales with the page, with a ``<title>`` for screen
readers. Axis ticks are "nice" numbers (1, 2 or 5 times a power of ten: Heckbert, *Nice
Numbers for Graph Labels*, Graphics Gems, 1990; common practice).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from html import escape

import numpy as np

from pqflow.report import numbers

# a run's figures arrive as numpy arrays or plain lists
Floats = Sequence[float] | np.ndarray

__all__ = [
    "PALETTE",
    "nice_ticks",
    "fan_chart",
    "line_chart",
    "bar_chart",
    "waterfall_chart",
    "Series",
    "Band",
]

PALETTE = ("#1f5f8b", "#c0502b", "#4c8c3f", "#7a4c9c", "#a07818", "#2a8c8c")
_W, _H = 640, 300
_M = {"left": 64, "right": 16, "top": 34, "bottom": 44}


@dataclass(frozen=True, kw_only=True)
class Series:
    """A line: ``x``, ``y`` of one length; ``dashed`` for reference lines."""

    label: str
    x: Floats
    y: Floats
    colour: str = PALETTE[0]
    dashed: bool = False


@dataclass(frozen=True, kw_only=True)
class Band:
    """A filled band between ``lower`` and ``upper`` over ``x``."""

    label: str
    x: Floats
    lower: Floats
    upper: Floats
    colour: str = PALETTE[0]
    opacity: float = 0.2


def nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    """About ``n`` round tick values covering ``[lo, hi]``."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return [0.0, 1.0]
    if hi <= lo:
        pad = abs(lo) * 0.05 or 1.0
        lo, hi = lo - pad, hi + pad

    def nice(x: float, round_: bool) -> float:
        e = math.floor(math.log10(x))
        f = x / 10**e
        if round_:
            g = 1 if f < 1.5 else 2 if f < 3 else 5 if f < 7 else 10
        else:
            g = 1 if f <= 1 else 2 if f <= 2 else 5 if f <= 5 else 10
        return g * 10**e

    step = nice(nice(hi - lo, False) / max(n - 1, 1), True)
    start = math.floor(lo / step) * step
    ticks = []
    t = start
    while t <= hi + step * 1e-9 + step:
        ticks.append(round(t, 12))
        if t >= hi:
            break
        t += step
    return ticks


def _fmt_default(v: float) -> str:
    """Axis ticks: round numbers without trailing zeros and never an exponent."""
    if v == 0 or abs(v) < 1e-12:
        return "0"
    text = numbers.number(round(float(v), 12), 3)
    return text.rstrip("0").rstrip(".") if "." in text else text


class _Frame:
    def __init__(self, x_lo, x_hi, y_lo, y_hi, width=_W, height=_H):
        self.w, self.h = width, height
        self.xt = nice_ticks(x_lo, x_hi)
        self.yt = nice_ticks(y_lo, y_hi)
        self.x0, self.x1 = min(self.xt[0], x_lo), max(self.xt[-1], x_hi)
        self.y0, self.y1 = min(self.yt[0], y_lo), max(self.yt[-1], y_hi)
        if self.x1 == self.x0:
            self.x1 = self.x0 + 1.0
        if self.y1 == self.y0:
            self.y1 = self.y0 + 1.0
        self.pl, self.pr = _M["left"], width - _M["right"]
        self.pt, self.pb = _M["top"], height - _M["bottom"]

    def px(self, x: float) -> float:
        return self.pl + (x - self.x0) / (self.x1 - self.x0) * (self.pr - self.pl)

    def py(self, y: float) -> float:
        return self.pb - (y - self.y0) / (self.y1 - self.y0) * (self.pb - self.pt)

    def axes(self, title: str, x_label: str, y_label: str, y_fmt: Callable[[float], str]) -> list[str]:
        out = [f'<rect x="{self.pl}" y="{self.pt}" width="{self.pr - self.pl}" '
               f'height="{self.pb - self.pt}" fill="#fff" stroke="#bbb"/>']
        for t in self.yt:
            if self.y0 - 1e-12 <= t <= self.y1 + 1e-12:
                y = self.py(t)
                out.append(f'<line x1="{self.pl}" x2="{self.pr}" y1="{y:.1f}" y2="{y:.1f}" stroke="#eee"/>')
                out.append(f'<text x="{self.pl - 6}" y="{y + 4:.1f}" text-anchor="end" class="tick">'
                           f'{escape(y_fmt(t))}</text>')
        for t in self.xt:
            if self.x0 - 1e-12 <= t <= self.x1 + 1e-12:
                x = self.px(t)
                out.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{self.pb}" y2="{self.pb + 4}" stroke="#888"/>')
                out.append(f'<text x="{x:.1f}" y="{self.pb + 17}" text-anchor="middle" class="tick">'
                           f'{escape(_fmt_default(t))}</text>')
        out.append(f'<text x="{self.w / 2:.0f}" y="20" text-anchor="middle" class="ctitle">{escape(title)}</text>')
        out.append(f'<text x="{(self.pl + self.pr) / 2:.0f}" y="{self.h - 8}" text-anchor="middle" '
                   f'class="alabel">{escape(x_label)}</text>')
        out.append(f'<text x="14" y="{(self.pt + self.pb) / 2:.0f}" text-anchor="middle" class="alabel" '
                   f'transform="rotate(-90 14 {(self.pt + self.pb) / 2:.0f})">{escape(y_label)}</text>')
        return out


def _svg(parts: list[str], title: str, width: int = _W, height: int = _H, data: str = "") -> str:
    style = (
        "<style>.tick{font:11px sans-serif;fill:#444}.ctitle{font:bold 13px sans-serif;fill:#222}"
        ".alabel{font:11px sans-serif;fill:#333}.legend{font:11px sans-serif;fill:#333}</style>"
    )
    return (
        f'<svg viewBox="0 0 {width} {height}" width="100%" role="img" class="chart" {data} '
        f'preserveAspectRatio="xMidYMid meet"><title>{escape(title)}</title>{style}'
        + "".join(parts) + "</svg>"
    )


def _path(frame: _Frame, x: Floats, y: Floats) -> str:
    pts = [(frame.px(float(a)), frame.py(float(b))) for a, b in zip(x, y, strict=True) if math.isfinite(float(b))]
    return " ".join(("M" if i == 0 else "L") + f"{a:.1f},{b:.1f}" for i, (a, b) in enumerate(pts))


def _polygon(frame: _Frame, x: Floats, lo: Floats, hi: Floats) -> str:
    up = [f"{frame.px(float(a)):.1f},{frame.py(float(b)):.1f}" for a, b in zip(x, hi, strict=True)]
    dn = [f"{frame.px(float(a)):.1f},{frame.py(float(b)):.1f}" for a, b in zip(x, lo, strict=True)][::-1]
    return " ".join(up + dn)


def _legend(frame: _Frame, items: list[tuple[str, str, str]]) -> list[str]:
    """items: (label, colour, kind) with kind 'line', 'dash' or 'band'."""
    out, x, y = [], frame.pl + 8, frame.pt + 14
    for label, colour, kind in items:
        if kind.startswith("band"):
            opacity = kind.partition(":")[2] or "0.35"
            out.append(f'<rect x="{x}" y="{y - 8}" width="14" height="9" fill="{colour}" opacity="{opacity}"/>')
        else:
            dash = ' stroke-dasharray="5,3"' if kind == "dash" else ""
            out.append(f'<line x1="{x}" x2="{x + 14}" y1="{y - 4}" y2="{y - 4}" stroke="{colour}" '
                       f'stroke-width="2"{dash}/>')
        out.append(f'<text x="{x + 18}" y="{y}" class="legend">{escape(label)}</text>')
        x += 28 + 6.2 * len(label)
        if x > frame.pr - 120:
            x, y = frame.pl + 8, y + 14
    return out


def line_chart(
    *,
    title: str,
    series: Sequence[Series],
    bands: Sequence[Band] = (),
    x_label: str = "years",
    y_label: str = "",
    y_format: Callable[[float], str] = _fmt_default,
    hlines: Sequence[tuple[float, str]] = (),
    log_y: bool = False,
    y_range: tuple[float, float] | None = None,
    vlines: Sequence[tuple[float, str]] = (),
) -> str:
    """Lines over optional filled bands and horizontal (``hlines``) and vertical (``vlines``)
    reference lines; ``log_y`` draws the values on a base-10 logarithmic axis (they must be
    positive). ``y_range`` (in the values' own units) fixes the y-axis so that panels of one
    quantity share it; the data are never clipped by it (the axis covers both)."""
    if y_range is not None and log_y:
        y_range = tuple(math.log10(v) if v > 0 else float("nan") for v in y_range)  # type: ignore[assignment]
    if log_y:
        def lg(v: Floats) -> list[float]:
            return [math.log10(float(a)) if float(a) > 0 else float("nan") for a in v]

        series = [Series(label=s.label, x=s.x, y=lg(s.y), colour=s.colour, dashed=s.dashed) for s in series]
        bands = [Band(label=b.label, x=b.x, lower=lg(b.lower), upper=lg(b.upper), colour=b.colour,
                      opacity=b.opacity) for b in bands]
        hlines = [(math.log10(h), label) for h, label in hlines if h > 0]
        inner = y_format
        y_format = lambda v: inner(float(f"{10 ** v:.2g}"))  # noqa: E731
    ys = [float(v) for s in series for v in s.y] + [float(v) for b in bands for v in (*b.lower, *b.upper)]
    ys += [h for h, _ in hlines]
    if y_range is not None:
        ys += [float(v) for v in y_range]
    xs = [float(v) for s in series for v in s.x] + [float(v) for b in bands for v in b.x]
    ys = [v for v in ys if math.isfinite(v)] or [0.0, 1.0]
    xs = xs or [0.0, 1.0]
    f = _Frame(min(xs), max(xs), min(ys), max(ys))
    parts = f.axes(title, x_label, y_label, y_format)
    for b in bands:
        parts.append(f'<polygon points="{_polygon(f, b.x, b.lower, b.upper)}" fill="{b.colour}" '
                     f'opacity="{b.opacity}" stroke="none"/>')
    for h, label in hlines:
        y = f.py(h)
        parts.append(f'<line x1="{f.pl}" x2="{f.pr}" y1="{y:.1f}" y2="{y:.1f}" stroke="#900" '
                     f'stroke-dasharray="4,3"/>')
        parts.append(f'<text x="{f.pr - 4}" y="{y - 4:.1f}" text-anchor="end" class="legend">{escape(label)}</text>')
    for v, label in vlines:
        x = f.px(v)
        parts.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{f.pt}" y2="{f.pb}" stroke="#555" '
                     f'stroke-dasharray="2,3"/>')
        parts.append(f'<text x="{x + 4:.1f}" y="{f.pb - 6}" class="legend">{escape(label)}</text>')
    for s in series:
        dash = ' stroke-dasharray="5,3"' if s.dashed else ""
        parts.append(f'<path d="{_path(f, s.x, s.y)}" fill="none" stroke="{s.colour}" stroke-width="1.8"{dash}/>')
    legend = [(b.label, b.colour, f"band:{min(0.9, b.opacity * 1.6):.2f}") for b in bands if b.label] + [
        (s.label, s.colour, "dash" if s.dashed else "line") for s in series if s.label]
    parts += _legend(f, legend)
    return _svg(parts, title, data=f'data-y-axis="{f.y0:.6g},{f.y1:.6g}"')


def fan_chart(
    *,
    title: str,
    times: Floats,
    percentiles: dict[float, Floats],
    colour: str = PALETTE[0],
    y_label: str = "",
    y_format: Callable[[float], str] = _fmt_default,
    reference: Series | None = None,
    log_y: bool = False,
    y_range: tuple[float, float] | None = None,
) -> str:
    """Percentile bands 1-99, 5-95, 25-75 and the median; ``percentiles`` maps 1, 5, 25, 50,
    75, 95, 99 to values over ``times``; ``y_range`` as in :func:`line_chart`."""
    bands = []
    for (lo, hi), opacity in (((1, 99), 0.15), ((5, 95), 0.25), ((25, 75), 0.4)):
        if lo in percentiles and hi in percentiles:
            bands.append(Band(label=f"{lo}-{hi}%", x=times, lower=percentiles[lo], upper=percentiles[hi],
                              colour=colour, opacity=opacity))
    series = [Series(label="median", x=times, y=percentiles[50], colour=colour)] if 50 in percentiles else []
    if reference is not None:
        series.append(reference)
    return line_chart(title=title, series=series, bands=bands, y_label=y_label, y_format=y_format, log_y=log_y,
                      y_range=y_range)


def bar_chart(
    *,
    title: str,
    labels: Sequence[str],
    values: Floats,
    errors: Floats | None = None,
    y_label: str = "",
    tolerance: float | None = None,
    colour: str = PALETTE[0],
    min_span: float = 0.0,
    y_range: tuple[float, float] | None = None,
) -> str:
    """Vertical bars (with optional +- error whiskers and a +- tolerance band).

    ``min_span``: the y-axis covers at least ``[-min_span, min_span]``, so that rounding noise
    (a closed-form fit repriced to 1e-13 bp) is drawn as the flat line it is, not as full-height
    bars; ``y_range`` fixes the axis (panels of one quantity share it)."""
    n = max(len(values), 1)
    vals = np.array([float(v) if v is not None and math.isfinite(float(v)) else 0.0 for v in values])
    errs = np.zeros_like(vals) if errors is None else np.array(
        [float(e) if e is not None and math.isfinite(float(e)) else 0.0 for e in errors])
    lo = float(min(0.0, (vals - errs).min() if vals.size else 0.0, -(tolerance or 0.0), -min_span))
    hi = float(max(0.0, (vals + errs).max() if vals.size else 1.0, tolerance or 0.0, min_span))
    if y_range is not None:
        lo, hi = min(lo, float(y_range[0])), max(hi, float(y_range[1]))
    height = _H + 60
    f = _Frame(0.0, float(n), lo, hi, height=height)
    f.xt = []
    f.pb = height - _M["bottom"] - 60
    parts = f.axes(title, "", y_label, _fmt_default)
    if tolerance:
        parts.append(f'<rect x="{f.pl}" y="{f.py(tolerance):.1f}" width="{f.pr - f.pl}" '
                     f'height="{f.py(-tolerance) - f.py(tolerance):.1f}" fill="#4c8c3f" opacity="0.12"/>')
    zero = f.py(0.0)
    parts.append(f'<line x1="{f.pl}" x2="{f.pr}" y1="{zero:.1f}" y2="{zero:.1f}" stroke="#666"/>')
    slot = (f.pr - f.pl) / n
    for i, (v, e, label) in enumerate(zip(vals, errs, labels, strict=True)):
        x = f.pl + i * slot + slot * 0.15
        w = slot * 0.7
        top, bottom = sorted((f.py(v), zero))
        parts.append(f'<rect x="{x:.1f}" y="{top:.1f}" width="{w:.1f}" height="{max(bottom - top, 0.5):.1f}" '
                     f'fill="{colour}"><title>{escape(label)}: {escape(numbers.number(v))}</title></rect>')
        if e > 0:
            cx = x + w / 2
            parts.append(f'<line x1="{cx:.1f}" x2="{cx:.1f}" y1="{f.py(v - e):.1f}" y2="{f.py(v + e):.1f}" '
                         f'stroke="#222"/>')
        lx = x + w / 2
        parts.append(f'<text x="{lx:.1f}" y="{f.pb + 10}" class="tick" text-anchor="end" '
                     f'transform="rotate(-45 {lx:.1f} {f.pb + 10})">{escape(label)}</text>')
    return _svg(parts, title, height=height, data=f'data-y-axis="{f.y0:.6g},{f.y1:.6g}"')


def waterfall_chart(
    *,
    title: str,
    start_label: str,
    start: float,
    labels: Sequence[str],
    deltas: Floats,
    errors: Floats | None = None,
    end_label: str = "end",
    y_label: str = "",
    y_format: Callable[[float], str] = _fmt_default,
) -> str:
    """A waterfall: the start value, each step's change as a bar floating from the running
    total (up in red, down in green; whiskers +- ``errors``), and the end value."""
    vals = [float(d) for d in deltas]
    running = [float(start)]
    for d in vals:
        running.append(running[-1] + d)
    errs = [float(e) for e in errors] if errors is not None else [0.0] * len(vals)
    lo = min(running + [r - e for r, e in zip(running[1:], errs, strict=True)])
    hi = max(running + [r + e for r, e in zip(running[1:], errs, strict=True)])
    pad = 0.15 * (hi - lo or abs(hi) or 1.0)
    n = len(vals) + 2
    height = _H + 60
    f = _Frame(0.0, float(n), lo - pad, hi + pad, height=height)
    f.xt = []
    f.pb = height - _M["bottom"] - 60
    parts = f.axes(title, "", y_label, y_format)
    slot = (f.pr - f.pl) / n
    names = [start_label, *labels, end_label]
    for i in range(n):
        x = f.pl + i * slot + slot * 0.15
        w = slot * 0.7
        if i == 0 or i == n - 1:
            v = running[0] if i == 0 else running[-1]
            top, bottom = sorted((f.py(v), float(f.pb)))  # from the axis: the level itself
            colour, tip = "#8a8a8a", f"{names[i]}: {numbers.number(v, 6)}"
        else:
            a, b = running[i - 1], running[i]
            top, bottom = sorted((f.py(a), f.py(b)))
            colour = "#c0502b" if b > a else "#4c8c3f"
            tip = f"{names[i]}: {numbers.signed(b - a, 4)}"
        parts.append(f'<rect x="{x:.1f}" y="{top:.1f}" width="{w:.1f}" height="{max(bottom - top, 0.8):.1f}" '
                     f'fill="{colour}"><title>{escape(tip)}</title></rect>')
        if 0 < i < n - 1 and errs[i - 1] > 0:
            cx, b = x + w / 2, running[i]
            parts.append(f'<line x1="{cx:.1f}" x2="{cx:.1f}" y1="{f.py(b - errs[i - 1]):.1f}" '
                         f'y2="{f.py(b + errs[i - 1]):.1f}" stroke="#222"/>')
        lx = x + w / 2
        parts.append(f'<text x="{lx:.1f}" y="{f.pb + 10}" class="tick" text-anchor="end" '
                     f'transform="rotate(-35 {lx:.1f} {f.pb + 10})">{escape(names[i])}</text>')
    return _svg(parts, title, height=height)
