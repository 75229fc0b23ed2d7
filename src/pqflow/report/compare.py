"""What moved between two runs (last quarter's and this quarter's, or two seeds of one).

Read from each run's ``calibration.json``, ``validation/summary.json``, ``valuation/summary.json``
and ``manifest.json``; nothing is recomputed from the model. Inputs are matched by what they
are, never by a key that holds the quoted value:

* the curve by maturity (zero rates of the fitted curve), moves in bp;
* swaptions by expiry and tenor, moves in bp of normal volatility;
* equity options by index, expiry and moneyness (strike over the forward), moves in vol points;
* inflation swaps and credit spreads by maturity (bp), caps and floors by kind, maturity and
  strike (premium in bp of notional); index levels in percent;
* every other calibration input (the configuration's settings) by its name, shown readably.

Then the calibrated parameters under readable names (``equity veldmark_all_share volatility
from 5y``), the checks whose verdict changed, and, when both runs were valued, the best
estimate, guarantee value and TVOG by line. Moves within a group are listed largest first.

:func:`summary_lines` gives the concise terminal view, :func:`comparison_json` the machine
view and :func:`write_compare_html` a self-contained page with charts (a derived view, written
atomically). Every number is formatted by :mod:`pqflow.report.numbers`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from html import escape
from pathlib import Path
from typing import Any, TypeGuard

import numpy as np

import pqflow.calibration.part_kinds  # noqa: F401  (the shipped part kinds, registered)
from pqflow.errors import ConfigError, IntegrityError, PqflowError
from pqflow.models.parts import (
    PART_KINDS,
    part_compare_group,
    part_compare_parameters,
    part_compare_quotes,
    part_fit_key,
    part_instruments_key,
    recorded_parts,
)
from pqflow.report import numbers as fmt
from pqflow.storage.calibration_file import (
    CALIBRATION_FILE,
    CalibrationRecord,
    IndexRecord,
    calibration_path,
    plugin_part_fields,
    read_calibration_file,
)
from pqflow.storage.manifest import MANIFEST, read_manifest
from pqflow.storage.validation_summary import VALIDATION_SUMMARY, ValidationSummary, read_validation_summary
from pqflow.storage.valuation_summary import VALUATION_SUMMARY, ValuationSummary, read_valuation_summary

__all__ = [
    "Move",
    "Comparison",
    "compare_runs",
    "comparison_json",
    "summary_lines",
    "write_compare_html",
    "GROUPS",
]

_ZERO_MATURITIES = (1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 25.0, 30.0, 40.0, 50.0, 60.0)
_SCHEDULE_TIMES = (0.0, 1.0, 5.0, 10.0, 20.0, 30.0, 50.0)
GROUPS = (
    ("curve", "Curve (zero rates of the fitted curve)"),
    ("swaptions", "Swaption volatilities"),
    ("equity_options", "Equity option volatilities"),
    ("levels", "Index levels and yields"),
    ("inflation", "Inflation quotes"),
    ("credit", "Credit spreads"),
    ("parts", "Part plug-in quotes"),
    ("settings", "Other inputs and settings"),
    ("files", "Market-data files"),
)
# unit -> (how a value is shown, how a move is shown)
_UNITS = {
    "rate": (fmt.percent, fmt.bp_move),
    "bp": (lambda v: fmt.bp(v, 1), lambda d: fmt.bp(d, 1, sign=True)),
    "vol": (lambda v: fmt.vol_points(v) + " pts" if fmt.is_number(v) else fmt.DASH, fmt.vol_move),
    "level": (lambda v: fmt.plain(v, 6), lambda d: fmt.signed(d, 4)),
    "plain": (lambda v: fmt.plain(v, 4), lambda d: fmt.signed(d, 3)),
    "money": (fmt.money, lambda d: fmt.money(d, sign=True)),
    "text": (lambda v: fmt.DASH if v is None else _short_id(str(v)), lambda d: ""),
}


def _short_id(text: str) -> str:
    """Hashes and run ids shown by their first 12 characters, as git does (JSON keeps them whole)."""
    return text[:12] if len(text) >= 32 and all(c in "0123456789abcdef" for c in text) else text


@dataclass(frozen=True, kw_only=True)
class Move:
    """One item in both runs (or in one of them): ``old``/``new`` values in ``unit``; ``move``
    is ``new - old`` when both are numbers; ``status`` is moved, same, added or removed."""

    group: str
    item: str
    old: Any
    new: Any
    unit: str
    move: float | None
    status: str
    relative: float | None = None  # for levels: the move over the old value

    def shown(self) -> tuple[str, str, str]:
        show, show_move = _UNITS[self.unit]
        if self.status in ("added", "removed"):
            return show(self.old) if self.old is not None else fmt.DASH, \
                show(self.new) if self.new is not None else fmt.DASH, self.status
        if self.unit == "text" or self.move is None:
            return show(self.old), show(self.new), "changed" if self.status == "moved" else "="
        move = show_move(self.move)
        if self.relative is not None and self.status == "moved":
            move += f" ({fmt.percent(self.relative, 2, sign=True)})"
        return show(self.old), show(self.new), move if self.status == "moved" else "="

    def size(self) -> float:
        """How far it moved in its displayed unit (bp, points, percent): the sort key."""
        if self.move is None:
            return math.inf if self.status in ("added", "removed", "moved") else 0.0
        scale = {"rate": 1e4, "vol": 100.0}.get(self.unit, 1.0)
        if self.relative is not None:
            return abs(self.relative) * 100.0
        return abs(self.move) * scale


@dataclass(frozen=True, kw_only=True)
class Comparison:
    """What moved between ``old_run`` and ``new_run`` (paths as given)."""

    old_run: str
    new_run: str
    identity: tuple[Move, ...]
    inputs: tuple[Move, ...]
    parameters: tuple[Move, ...]
    checks: tuple[Move, ...]
    liabilities: tuple[Move, ...]
    curves: dict[str, dict[str, list[float]]]
    currency: str = ""
    liability_se: dict[str, tuple[float | None, float | None]] | None = None  # item -> (old SE, new SE)

    def moved(self, moves: tuple[Move, ...] | list[Move]) -> list[Move]:
        return [m for m in moves if m.status != "same"]


# -- reading a run ----------------------------------------------------------------------------

def _is_num(v: Any) -> TypeGuard[float | str]:  # what float() reads to a finite number
    return fmt.is_number(v)


def _move(group: str, item: str, old: Any, new: Any, unit: str, *, relative: bool = False) -> Move:
    if old is None and new is not None:
        return Move(group=group, item=item, old=None, new=new, unit=unit, move=None, status="added")
    if new is None and old is not None:
        return Move(group=group, item=item, old=old, new=None, unit=unit, move=None, status="removed")
    if _is_num(old) and _is_num(new) and unit != "text":
        d = float(new) - float(old)
        same = abs(d) <= 1e-12 * max(abs(float(old)), abs(float(new)), 1e-300)
        rel = d / abs(float(old)) if relative and float(old) != 0 else None
        return Move(group=group, item=item, old=old, new=new, unit=unit, move=0.0 if same else d,
                    status="same" if same else "moved", relative=None if same else rel)
    return Move(group=group, item=item, old=old, new=new, unit="text", move=None,
                status="same" if old == new else "moved")


def _load(run: Path) -> dict[str, Any]:
    cal_path = calibration_path(run)
    if not cal_path.is_file():
        raise IntegrityError(f"{run}: no {CALIBRATION_FILE}; not a pqflow run directory")
    out: dict[str, Any] = {"cal": read_calibration_file(cal_path)}
    out["summary"] = read_validation_summary(run / VALIDATION_SUMMARY) if (run / VALIDATION_SUMMARY).is_file() else None
    out["manifest"] = read_manifest(run) if (run / MANIFEST).is_file() else None
    out["valuation"] = read_valuation_summary(run / VALUATION_SUMMARY) if (run / VALUATION_SUMMARY).is_file() else None
    return out


def _curve(cal: CalibrationRecord) -> Any:
    try:
        from pqflow.market.serialize import curve_from_json

        return curve_from_json(cal.curve)
    except (KeyError, TypeError, ValueError, PqflowError):
        return None


def _schedule_at(v: Any, t: float) -> float | None:
    if isinstance(v, dict) and "knots" in v:
        knots, vals = list(v.get("knots", [])), list(v.get("values", []))
        if not vals:
            return None
        i = max(int(np.searchsorted(np.asarray(knots, dtype=float), t, side="right")) - 1, 0)
        return float(vals[min(i, len(vals) - 1)])
    return float(v) if _is_num(v) else None


def _schedule_items(name: str, v: Any, unit: str) -> dict[str, tuple[Any, str]]:
    """A constant as one item; a schedule as its value from each of a few standard times."""
    if isinstance(v, dict) and "knots" in v:
        knots = [float(k) for k in v.get("knots", [])]
        times = knots if len(knots) <= 8 else [t for t in _SCHEDULE_TIMES if t <= (knots[-1] if knots else 0) + 1]
        return {f"{name} from {fmt.years(t)}y": (_schedule_at(v, t), unit) for t in times}
    return {name: (v, unit)}


def _curve_points(cal: CalibrationRecord) -> dict[str, tuple[Any, str]]:
    curve = _curve(cal)
    if curve is None:
        return {}
    return {f"zero rate {fmt.years(m)}y": (float(-np.log(curve.discount(m)) / m), "rate")
            for m in _ZERO_MATURITIES if m <= float(curve.max_maturity)}


def _indices(cal: CalibrationRecord) -> tuple[IndexRecord, ...]:
    """The recorded indices, core first (none when the file's index entries are incomplete)."""
    try:
        return cal.indices
    except ConfigError:
        return ()


def _forward(cal: CalibrationRecord, index: str, expiry: float) -> float | None:
    """Equity forward ``S e^{-qT} / P(0, T)`` of an index, from the run's own parameters."""
    curve = _curve(cal)
    item = next((i for i in _indices(cal) if i.name == index), None)
    if curve is None or item is None:
        return None
    return float(item.level) * math.exp(-float(item.income_yield) * expiry) / float(curve.discount(expiry))


def _inputs(cal: CalibrationRecord) -> dict[str, dict[str, tuple[Any, str]]]:
    """Every input by meaning, per group: ``{group: {item: (value, unit)}}``."""
    out: dict[str, dict[str, tuple[Any, str]]] = {g: {} for g, _ in GROUPS}
    out["curve"] = _curve_points(cal)
    inst = cal.instruments
    for s in cal.swaptions:
        key = f"swaption {fmt.years(s.expiry)}y x {fmt.years(s.tenor)}y"
        conv = s.convention
        if conv == "normal":
            out["swaptions"][key] = (1e4 * float(s.market_vol), "bp")  # type: ignore[arg-type]
        else:
            out["swaptions"][f"{key} ({conv})"] = (s.market_vol, "vol")
    for o in cal.equity_options:
        t = o.expiry
        f = _forward(cal, str(o.index), t)
        if f and _is_num(o.strike):
            m = 100.0 * o.strike / f  # whole percent where it is one (ATM forward: 100%)
            money = f"moneyness {m:.0f}%" if abs(m - round(m)) < 0.05 else f"moneyness {m:.1f}%"
        else:
            money = f"strike {fmt.plain(o.strike, 6)}"
        kind = f" {o.kind}" if o.kind != "call" else ""
        out["equity_options"][f"{o.index} {fmt.years(t)}y{kind}, {money}"] = (o.market_vol, "vol")
    fit = cal.fit
    for _, legacy, _ in recorded_parts(cal.parameters, {}):  # kinds with an entry of their own (inflation)
        out[part_compare_group(legacy)].update(part_compare_quotes(
            legacy, list(inst.get(part_instruments_key(legacy)) or []), fit.get(part_fit_key(legacy)) or {}, fmt))
    for rating in cal.credit_fit.ratings:
        for pillar in rating.spreads:
            out["credit"][f"{rating.rating} spread {fmt.years(pillar.maturity)}y"] = (pillar.market_spread, "rate")
    for name in cal.plugin_parts:  # a part plug-in's quotes, labelled by its kind
        part_kind = PART_KINDS.get(name)
        if part_kind is not None:
            quotes = list(inst.get(part_instruments_key(part_kind)) or [])
            out[part_compare_group(part_kind)].update(
                part_compare_quotes(part_kind, quotes, fit.get(part_fit_key(part_kind)) or {}, fmt))
    for item in _indices(cal):  # the core index first, with its dividend yield
        out["levels"][f"{item.name} level"] = (item.level, "level")
        yield_name = "dividend yield" if item.core else "income yield"
        out["levels"][f"{item.name} {yield_name}"] = (item.income_yield, "rate")
    inputs = cal.inputs
    for kind, f in (inputs.get("files") or {}).items():  # by content: a moved folder is no change
        out["files"][f"{kind.replace('_', ' ')} ({Path(str(f.get('path'))).name}), sha256"] = \
            (str(f.get("sha256", "")) or None, "text")
    out["settings"] = _settings(inputs)
    return out


def _readable(path: str) -> str:
    """``real_world.equity_risk_premium`` as "real world: equity risk premium"."""
    head, _, tail = path.partition(".")
    return f"{head.replace('_', ' ')}: {tail.replace('.', ', ').replace('_', ' ')}" if tail else head.replace("_", " ")


def _unit_of(key: str, v: Any) -> str:
    k = key.lower()
    if not _is_num(v) or isinstance(v, bool):
        return "text"
    if k.endswith("_bp") or k.endswith("tolerance_bp"):
        return "plain"
    if any(w in k for w in ("rate", "premium", "yield", "level", "mean", "spread", "drift")) and \
            "reversion" not in k and "price_of_risk" not in k and "level" != k.rsplit(".", 1)[-1] and abs(float(v)) < 1:
        return "rate"
    if "volatility" in k and abs(float(v)) < 2:
        return "vol"
    return "plain"


def _settings(inputs: dict[str, Any]) -> dict[str, tuple[Any, str]]:
    """The configuration's inputs other than the market-data files, by readable name."""
    out: dict[str, tuple[Any, str]] = {}

    def walk(obj: Any, path: str) -> None:
        if isinstance(obj, dict):
            for k, v in obj.items():
                walk(v, f"{path}.{k}" if path else str(k))
        elif isinstance(obj, list) and obj and all(isinstance(x, dict) for x in obj):
            for i, v in enumerate(obj):
                name = v.get("name") if isinstance(v, dict) else None
                walk({kk: vv for kk, vv in v.items() if kk != "name"}, f"{path}.{name if name else i + 1}")
        elif isinstance(obj, list):
            text = ", ".join(fmt.plain(x, 6) if _is_num(x) else str(x) for x in obj)
            out[_readable(path)] = (text if len(obj) <= 12
                                    else f"{len(obj)} values, sum "
                                         f"{fmt.plain(sum(float(x) for x in obj if _is_num(x)), 6)}"
                                    if all(_is_num(x) for x in obj) else text, "text")
        else:
            out[_readable(path)] = (obj, _unit_of(path, obj))

    walk({k: v for k, v in inputs.items() if k not in ("files", "market_data")}, "")
    return out


def _parameters(cal: CalibrationRecord) -> dict[str, tuple[Any, str]]:
    """Calibrated parameters under readable names (unit: rate, vol, plain, level)."""
    par = cal.parameters
    out: dict[str, tuple[Any, str]] = {}
    if (hw := cal.hull_white) is not None and cal.rates_model == "hull_white":
        out["Hull-White mean reversion a"] = (hw.mean_reversion, "plain")
        out["Hull-White volatility sigma (normal)"] = (hw.volatility, "rate")
    if (g := cal.g2pp) is not None:
        out.update({"G2++ a": (g.a, "plain"), "G2++ sigma": (g.sigma, "rate"),
                    "G2++ b": (g.b, "plain"), "G2++ eta": (g.eta, "rate"),
                    "G2++ rho": (g.rho, "plain")})
    indices = _indices(cal)
    core = next((i for i in indices if i.core), None)
    for item in indices:  # the core index first: its volatility and correlation with the short rate
        out.update(_schedule_items(f"{item.kind} {item.name} volatility", item.volatility, "vol"))
        if item.core:
            out[f"equity {item.name} correlation with the short rate"] = (item.correlation_with_rates, "plain")
        else:
            out.update(_schedule_items(f"{item.name} price of risk", item.market_price_of_risk, "plain"))
    mpr = cal.market_prices_of_risk
    out.update(_schedule_items("rates price of risk", mpr.rates if mpr is not None else None, "plain"))
    out.update(_schedule_items(f"equity {core.name if core is not None else ''} price of risk",
                               core.market_price_of_risk if core is not None else None, "plain"))
    for _, legacy, entry in recorded_parts(par, {}):  # kinds with an entry of their own (inflation)
        out.update(part_compare_parameters(legacy, entry))
    credit = cal.credit
    for r in credit.ratings if credit is not None else ():
        c, n = r.cir, r.name
        out.update({f"credit {n} mean reversion kappa": (c.mean_reversion, "plain"),
                    f"credit {n} long-run intensity mu": (c.long_run_mean, "rate"),
                    f"credit {n} volatility nu": (c.volatility, "plain"),
                    f"credit {n} initial intensity": (c.initial, "rate"),
                    f"credit {n} price of risk": (r.price_of_risk, "plain")})
    for name, entry in cal.plugin_parts.items():  # a part plug-in's parameters, through its kind
        out.update(part_compare_parameters(PART_KINDS.get(name), plugin_part_fields(entry, cal.source, name)[0]))
    dc = cal.driver_correlation
    for a, b, rho in dc.pairs() if dc is not None else ():
        out[f"correlation {a} / {b}"] = (rho, "plain")
    if (alpha := cal.curve_fit.alpha) is not None:
        out["Smith-Wilson convergence speed alpha"] = (alpha, "plain")
    return out


def _verdicts(summary: ValidationSummary | None) -> dict[str, tuple[Any, str]]:
    out: dict[str, tuple[Any, str]] = {}
    if summary is None:
        return out
    for name, c in summary.checks.items():
        out[name.replace("_", " ")] = (c.verdict, "text")
        bench = c.wealth_ratio_benchmark
        if isinstance(bench, dict) and "verdict" in bench:
            out["equity wealth ratios vs 2005 benchmark (reported)"] = (bench.get("verdict"), "text")
    out["overall verdict"] = (summary.verdict, "text")
    return out


def _liabilities(val: ValuationSummary | None) -> dict[str, tuple[Any, str]]:
    from pqflow.report.html import liability_rows

    out: dict[str, tuple[Any, str]] = {}
    for r in liability_rows(val) if val is not None else []:
        for key, label in (("be", "best estimate"), ("guarantee", "guarantee value"), ("tvog", "TVOG")):
            out[f"{r['label']}: {label}"] = (r.get(key), "money")
    return out


def _liability_se(val: ValuationSummary | None) -> dict[str, float | None]:
    from pqflow.report.html import liability_rows

    out: dict[str, float | None] = {}
    for r in liability_rows(val) if val is not None else []:
        for key, label in (("be", "best estimate"), ("guarantee", "guarantee value"), ("tvog", "TVOG")):
            out[f"{r['label']}: {label}"] = r.get(f"{key}_se")
    return out


def _currency(val: ValuationSummary | None) -> str:
    return str(val.currency if val is not None and val.currency is not None else "")


def _identity(run: dict[str, Any]) -> dict[str, tuple[Any, str]]:
    cal, man = run["cal"], run["manifest"]
    return {
        "run name": (man.run_name if man else None, "text"),
        "run id": (man.run_id if man else None, "text"),
        "valuation date": (cal.valuation_date, "text"),
        "configuration sha256": (man.config_sha256 if man else None, "text"),
        "calibration inputs sha256": (cal.inputs_sha256, "text"),
        "root seed": (str(man.root_seed) if man else None, "text"),
        "scenarios per set": (", ".join(f"{k.replace('_', ' ')} {fmt.count(v)}" for k, v in ((man.scenarios if man
                                                                                              else None) or {}).items())
                              or None, "text"),
        "pqflow version": (man.pqflow_version if man and man.pqflow_version is not None else cal.pqflow_version,
                           "text"),
    }


def _pairwise(group: str, a: dict[str, tuple[Any, str]], b: dict[str, tuple[Any, str]], *,
              sort: bool = True) -> list[Move]:
    moves = []
    for key in dict.fromkeys([*a, *b]):
        old, unit_a = a.get(key, (None, None))
        new, unit_b = b.get(key, (None, None))
        unit = unit_a or unit_b or "text"
        moves.append(_move(group, key, old, new, unit, relative=unit == "level"))
    if sort:
        moves.sort(key=lambda m: (m.status == "same", -round(m.size(), 6) if m.size() != math.inf else -1e300))
    return moves


def _curve_series(run: dict[str, Any]) -> dict[str, list[float]]:
    curve = _curve(run["cal"])
    if curve is None:
        return {}
    t = np.linspace(0.25, min(float(curve.max_maturity), 100.0), 200)
    return {"t": t.tolist(), "zero": (-np.log(curve.discount(t)) / t).tolist(),
            "forward": np.asarray(curve.forward(t), dtype=float).tolist()}


def compare_runs(old_run: str | Path, new_run: str | Path) -> Comparison:
    """Compare two run directories: ``old_run`` (last quarter, the reference) and ``new_run``."""
    a, b = _load(Path(old_run)), _load(Path(new_run))
    identity = _pairwise("identity", _identity(a), _identity(b), sort=False)
    ia, ib = _inputs(a["cal"]), _inputs(b["cal"])
    inputs: list[Move] = []
    for group, _ in GROUPS:
        inputs += _pairwise(group, ia.get(group, {}), ib.get(group, {}), sort=group != "curve")
    params = _pairwise("parameters", _parameters(a["cal"]), _parameters(b["cal"]))
    checks = _pairwise("checks", _verdicts(a["summary"]), _verdicts(b["summary"]), sort=False)
    liab: list[Move] = []
    se: dict[str, tuple[float | None, float | None]] = {}
    if a["valuation"] is not None and b["valuation"] is not None:
        liab = _pairwise("liabilities", _liabilities(a["valuation"]), _liabilities(b["valuation"]), sort=False)
        sa, sb = _liability_se(a["valuation"]), _liability_se(b["valuation"])
        se = {k: (sa.get(k), sb.get(k)) for k in dict.fromkeys([*sa, *sb])}
    return Comparison(
        old_run=str(old_run), new_run=str(new_run), identity=tuple(identity), inputs=tuple(inputs),
        parameters=tuple(params), checks=tuple(checks), liabilities=tuple(liab),
        curves={"old": _curve_series(a), "new": _curve_series(b)},
        currency=_currency(b["valuation"] or a["valuation"]), liability_se=se,
    )


# -- views -----------------------------------------------------------------------------------

def _row(m: Move) -> dict[str, Any]:
    old, new, move = m.shown()
    return {"group": m.group, "item": m.item, "old": old, "new": new, "move": move, "status": m.status,
            "old_value": m.old, "new_value": m.new, "change": m.move, "unit": m.unit}


def comparison_json(c: Comparison, *, everything: bool = False) -> dict[str, Any]:
    """The comparison for machines: raw values and changes (``unit`` says what they are in:
    rate = decimal, bp, vol = decimal volatility, level, plain, money, text) and the formatted
    text beside them. Unchanged items only with ``everything``."""
    keep = (lambda ms: [_row(m) for m in ms]) if everything else (lambda ms: [_row(m) for m in c.moved(ms)])
    return {
        "old_run": c.old_run, "new_run": c.new_run,
        "identity": [_row(m) for m in c.identity],
        "inputs": keep(c.inputs),
        "parameters": keep(c.parameters),
        "checks": keep(c.checks),
        "liabilities": [{**_row(m), "old_se": (c.liability_se or {}).get(m.item, (None, None))[0],
                         "new_se": (c.liability_se or {}).get(m.item, (None, None))[1]} for m in c.liabilities],
        "currency": c.currency,
        "unchanged": {"inputs": sum(m.status == "same" for m in c.inputs),
                      "parameters": sum(m.status == "same" for m in c.parameters)},
    }


def summary_lines(c: Comparison, *, everything: bool = False, per_group: int = 5) -> list[tuple[str, ...]]:
    """The terminal view as rows ``(kind, item, old, new, move)``; ``kind`` is ``title`` for a
    heading, ``row`` for an item and ``note`` for "... more" lines. At most ``per_group`` moves
    per group (all with ``everything``): about 60 lines for a quarter-on-quarter comparison."""
    out: list[tuple[str, ...]] = []
    ident = [m for m in c.identity if m.status != "same" and m.item in ("valuation date", "root seed", "run name",
                                                                          "scenarios per set", "pqflow version")]
    if ident:
        out.append(("title", "Runs", "old", "new", ""))
        out += [("row", m.item, *m.shown()[:2], "") for m in ident]

    def block(title: str, moves: list[Move], limit: int | None) -> None:
        moved = [m for m in moves if m.status != "same"] if not everything else list(moves)
        if not moved:
            return
        out.append(("title", title, "old", "new", "move"))
        shown = moved if limit is None else moved[:limit]
        out.extend(("row", m.item, *m.shown()) for m in shown)
        if len(moved) > len(shown):
            out.append(("note", f"... {len(moved) - len(shown)} more (--all)", "", "", ""))

    for group, title in GROUPS:
        moves = [m for m in c.inputs if m.group == group]
        if group == "curve":
            pick = [m for m in moves if m.item in {f"zero rate {fmt.years(t)}y" for t in (1, 5, 10, 20, 30, 50)}]
            block(title, pick if not everything else moves, None)
        else:
            block(title, moves, None if everything else per_group)
    block("Calibrated parameters", list(c.parameters), None if everything else 8)
    changed = [m for m in c.checks if m.status != "same"]
    if changed or everything:
        out.append(("title", "Checks whose verdict changed" if not everything else "Checks", "old", "new", ""))
        out.extend(("row", m.item, *m.shown()[:2], "") for m in (c.checks if everything else changed))
    if c.liabilities:
        out.append(("title", f"Liabilities ({c.currency}, market consistent)", "old", "new", "move"))
        out.extend(("row", m.item, *m.shown()) for m in c.liabilities)
    unchanged_in = sum(m.status == "same" for m in c.inputs)
    unchanged_par = sum(m.status == "same" for m in c.parameters)
    if not everything:
        out.append(("note", f"{unchanged_in} inputs and {unchanged_par} parameters unchanged", "", "", ""))
    return out


def _moves_chart(moves: list[Move], title: str, unit_label: str, scale: float) -> str:
    from pqflow.report import svg

    moved = [m for m in moves if m.status == "moved" and m.move is not None]
    moves_by = [float(m.move) for m in moved if m.move is not None]
    if not moved:
        return ""
    labels = [m.item.replace("zero rate ", "").replace("swaption ", "").replace("moneyness ", "") for m in moved]
    labels = [t if len(t) <= 22 else "…" + t[-21:] for t in labels]  # the full name is in the table
    return svg.bar_chart(title=title, labels=labels, values=[scale * v for v in moves_by],
                         y_label=unit_label)


def _table_html(rows: list[Move], *, with_move: bool = True,
                se: dict[str, tuple[float | None, float | None]] | None = None) -> str:
    head = '<tr><th class="l item">item</th><th>old</th><th>new</th>' + ("<th>move</th>" if with_move else "") + \
        ("<th>SE old / new</th>" if se else "") + "</tr>"
    body = []
    for m in rows:
        old, new, move = m.shown()
        extra = ""
        if se:
            s_old, s_new = se.get(m.item, (None, None))
            extra = f'<td class="num">{escape(fmt.money(s_old))} / {escape(fmt.money(s_new))}</td>'
        cls = "l" if m.unit == "text" else "num"  # identifiers and names are text, not numbers
        body.append(f'<tr><td class="l item">{escape(m.item)}</td><td class="{cls}">{escape(old)}</td>'
                    f'<td class="{cls}">{escape(new)}</td>'
                    + (f'<td class="num">{escape(move)}</td>' if with_move else "") + extra + "</tr>")
    return f'<table class="cmp"><thead>{head}</thead><tbody>{"".join(body)}</tbody></table>'


_CMP_CSS = ("<style>table.cmp{table-layout:fixed;width:100%;max-width:1050px}table.cmp td.item{word-break:break-word}"
            "table.cmp th.item{width:36%}table.cmp "
            "td.num{white-space:nowrap;overflow:hidden;text-overflow:ellipsis}</style>")


def _attribution_html(result: dict[str, Any], currency: str) -> str:
    from pqflow.report import svg

    rows = [r for r in result.get("rows", []) if r["line"] == "total"]
    totals = result.get("totals", {}).get("total", {})
    if not rows:
        return '<p class="note">No step changed anything: both runs were made from the same inputs.</p>'
    chart = svg.waterfall_chart(
        title=f"Best estimate, total line: old inputs to new ({currency})", start_label="old inputs",
        start=totals.get("start_best_estimate", 0.0), labels=[r["title"] for r in rows],
        deltas=[r["best_estimate_change"] for r in rows], errors=[2 * r["best_estimate_se"] for r in rows],
        end_label="new inputs", y_format=lambda v: fmt.plain(v / 1e6, 4), y_label=f"{currency} millions")
    body = "".join(
        f'<tr><td class="l">{r["step"]}. {escape(r["title"])}</td><td class="num">'
        f'{escape(fmt.money_se(r["best_estimate_change"], r["best_estimate_se"]))}</td><td class="num">'
        f'{escape(fmt.money_se(r["tvog_change"], r["tvog_se"]))}</td></tr>' for r in rows)
    body += (f'<tr><th class="l">total change</th><th '
             f'class="num">{escape(fmt.money(totals.get("best_estimate_total"), sign=True))}'
             f'</th><th class="num">{escape(fmt.money(totals.get("tvog_total"), sign=True))}</th></tr>')
    checks = "; ".join(f"{k.replace('_', ' ')}: {'yes' if v else 'no'}" for k, v in result.get("checks", {}).items())
    return (f'<div class="grid">{chart}</div><table class="cmp"><thead><tr><th class="l item">step (total line)</th>'
            f"<th>best estimate ± SE</th><th>TVOG ± SE</th></tr></thead><tbody>{body}</tbody></table>"
            f'<p class="note">{escape(str(result.get("rule", "")))}. Whiskers: 2 SE. {escape(checks)}</p>')


def write_compare_html(c: Comparison, path: str | Path, *, everything: bool = False,
                       attribution: dict[str, Any] | None = None) -> Path:
    """Write the comparison as one self-contained page (atomically); returns the path."""
    from pqflow.report import svg
    from pqflow.report.html import _rate_axis, page, write_html_atomic

    parts = [_CMP_CSS, "<h1>pqflow run comparison</h1>",
             f'<p>Old run: <code>{escape(c.old_run)}</code><br>New run: <code>{escape(c.new_run)}</code></p>']
    ident = [m for m in c.identity]
    parts.append('<section id="compare-identity"><h2>Runs</h2>' + _table_html(ident, with_move=False) + "</section>")
    charts = []
    if c.curves.get("old") and c.curves.get("new"):
        o, n = c.curves["old"], c.curves["new"]
        charts.append(svg.line_chart(
            title="Today's curve, old against new (continuously compounded)",
            series=[svg.Series(label="zero, old", x=o["t"], y=o["zero"], colour=svg.PALETTE[0], dashed=True),
                    svg.Series(label="zero, new", x=n["t"], y=n["zero"], colour=svg.PALETTE[0]),
                    svg.Series(label="forward, old", x=o["t"], y=o["forward"], colour=svg.PALETTE[1], dashed=True),
                    svg.Series(label="forward, new", x=n["t"], y=n["forward"], colour=svg.PALETTE[1])],
            x_label="maturity (years)", y_label="rate", y_format=_rate_axis))
    curve_moves = [m for m in c.inputs if m.group == "curve"]
    charts.append(_moves_chart(curve_moves, "Curve: zero-rate moves (bp)", "bp", 1e4))
    charts.append(_moves_chart([m for m in c.inputs if m.group == "swaptions" and m.unit == "bp"],
                               "Swaption normal vols: moves by instrument (bp)", "bp", 1.0))
    charts.append(_moves_chart([m for m in c.inputs if m.group == "equity_options"],
                               "Equity option vols: moves by instrument (vol points)", "points", 100.0))
    parts.append('<section id="compare-charts"><h2>What moved</h2><div class="grid">'
                 + "".join(ch for ch in charts if ch) + "</div></section>")
    parts.append('<section id="compare-inputs"><h2>Inputs</h2><p class="note">Matched by what they are (curve by '
                 "maturity, swaptions by expiry and tenor, options by expiry and moneyness); largest moves first "
                 "within each group.</p>")
    for group, title in GROUPS:
        moves = [m for m in c.inputs if m.group == group]
        shown = moves if everything else [m for m in moves if m.status != "same"]
        if shown:
            parts.append(f"<h3>{escape(title)}</h3>" + _table_html(shown))
    same = sum(m.status == "same" for m in c.inputs)
    parts.append(f'<p class="note">{same} inputs unchanged.</p></section>')
    params = list(c.parameters) if everything else [m for m in c.parameters if m.status != "same"]
    parts.append('<section id="compare-parameters"><h2>Calibrated parameters</h2>'
                 + (_table_html(params) if params else '<p class="note">Nothing differs.</p>')
                 + f'<p class="note">{sum(m.status == "same" for m in c.parameters)} parameters '
                   f'unchanged.</p></section>')
    changed = list(c.checks) if everything else [m for m in c.checks if m.status != "same"]
    parts.append('<section id="compare-checks"><h2>Checks</h2>'
                 + (_table_html(changed, with_move=False) if changed else '<p class="note">No verdict changed.</p>')
                 + "</section>")
    if c.liabilities:
        parts.append(f'<section id="compare-liabilities"><h2>Liabilities ({escape(c.currency)}, market consistent)</h2>'
                     + _table_html(list(c.liabilities), se=c.liability_se) + "</section>")
    else:
        parts.append('<section id="compare-liabilities"><h2>Liabilities</h2><p class="note">Shown when both runs '
                     "were valued (<code>pqflow value</code>).</p></section>")
    if attribution is not None:
        parts.append('<section id="compare-attribution"><h2>Attribution of the change</h2>'
                     + _attribution_html(attribution, c.currency) + "</section>")
    return write_html_atomic(path, page("pqflow run comparison", "".join(parts)))
