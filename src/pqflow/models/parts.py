"""Part plug-ins: one class per kind of Gaussian part gives everything a run needs of it.

A part kind (:class:`PartKind`) names its configuration section (``[parts.<section>]``, a pydantic
model), its drivers, how it is built from that section and today's market (:class:`PartContext`:
the curve, the rates model, the driver correlation), its ``calibration.json`` form, which
drivers each of its columns depends on, its martingale assets (possibly none) and a one-line
description. :func:`register_part` puts a kind in :data:`PART_KINDS` (and its section model in
the configuration's table); the configuration, the calibration and its file, the density blocks
and the martingale test consult the registry, so the engine, the densities and the storage need
no code of the part. The shipped kinds are registered in one place,
:mod:`pqflow.calibration.part_kinds` (the total-return indices and inflation are two, with their
legacy locations); credit and Heston predate the registry and keep their own code paths.

Optional hooks (a kind without them has no market file, no fit record and no instruments; the
defaults are the functions below, so a kind written before them still plugs in):

* ``market_files(section) -> {key: path}``: its market-data files, ``key`` the section's field
  that names the file and ``path`` as written there (relative to the configuration file); the
  calibration checks that each exists, records its sha256 in ``inputs.files`` (as
  ``<section>.<key>``) and passes the resolved paths on; a sensitivity set copies each file
  unshocked beside its shocked inputs and points the field at the copy;
* ``calibrate(section, files, context) -> PartFit``: its own fit (the part, a fit record stored
  under ``calibration.json`` ``fit.<fit_key>``, its instruments under
  ``instruments.<instruments_key>``, both keys defaulting to the section name); without it the
  part is :meth:`PartKind.build` from its section;
* ``instruments(records, context) -> [PartInstrument]``: its recorded instruments as the
  market-consistency check reprices them from the files (one cell per instrument and reference,
  judged by the check's one rule);
* ``column_drivers_on(column, rates_drivers)``: the drivers of its column when they include the
  run's rate drivers (asked instead of ``column_drivers``);
* ``entry_list`` (attribute) and ``fit_records(sections, fits)``: a kind whose configuration
  section is a sequence (one part per element, each calibrated by ``calibrate``) and where its
  fit records go (the total-return indices: ``fit.equity`` for the core, ``fit.indices`` for the
  others);
* ``config_key``, ``json_key``, ``market_data_keys``, ``compare_group`` (attributes): where a
  part that predates the plug-ins keeps its pieces - a top-level configuration table instead of
  ``[parts.<section>]``, its own key under ``calibration.json`` ``parameters`` instead of the
  plug-in entries, ``[market_data]`` keys of its files, its group in ``pqflow compare``;
* ``fit_text(fit, fmt) -> str``: the report's fit column of a plug-in; ``report_rows(entry,
  fit, fmt)``: the report's parameter rows of a kind with its own entry; ``fit_lines(entry, fit,
  fmt)``: what ``pqflow calibrate`` prints of its fit; ``compare_quotes(instruments, fit, fmt)``
  and ``compare_parameters(parameters)``: ``{label: (value, unit)}`` rows for ``pqflow compare``
  (units as :mod:`pqflow.report.compare` knows them: rate, bp, vol, plain, level, text).
  ``fmt`` is :mod:`pqflow.report.numbers`, handed down by the caller (every number a user reads
  is formatted by it; the kinds sit below the report).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Protocol, runtime_checkable

import numpy as np
from pydantic import BaseModel

from pqflow.config.part_sections import register_part_section, unregister_part_section
from pqflow.market.curve import DiscountCurve
from pqflow.models.economy import GaussianPart
from pqflow.models.rates import RatesModel
from pqflow.models.schedule import PiecewiseConstant

__all__ = [
    "PART_KINDS",
    "PartAsset",
    "PartContext",
    "PartFit",
    "PartInstrument",
    "PartInstrumentContext",
    "PartKind",
    "EntryPartKind",
    "entry_kind",
    "calibrate_part",
    "describe_part",
    "part_compare_parameters",
    "part_compare_quotes",
    "part_compare_group",
    "part_entry_list",
    "part_fit_key",
    "part_fit_records",
    "part_fit_lines",
    "part_fit_text",
    "part_instruments",
    "part_instruments_key",
    "part_market_files",
    "part_report_rows",
    "recorded_parts",
    "part_column_drivers",
    "register_part",
    "unregister_part",
]


@dataclass(frozen=True, kw_only=True)
class PartContext:
    """What a part is built from besides its section: today's nominal curve, the fitted rates
    model and the correlation of any two configured drivers."""

    curve: DiscountCurve
    rates: RatesModel
    correlation: Callable[[str, str], float]


@dataclass(frozen=True, kw_only=True)
class PartAsset:
    """A traded claim of a part for the martingale test: the columns ``value`` reads, its
    currency value at each output time from them (not deflated) and ``reference(times)``, today's
    price of the claim on it (``E[D_t A_t]``)."""

    name: str
    description: str
    columns: tuple[str, ...]
    value: Callable[[dict[str, np.ndarray]], np.ndarray]
    reference: Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True, kw_only=True)
class PartFit:
    """What a kind's calibration gives: the part, its fit record (``{}``: none; stored under
    ``calibration.json`` ``fit``) and its instruments (stored under ``instruments``), each a JSON
    object the kind's :func:`part_instruments` hook reads back."""

    part: GaussianPart
    fit: dict[str, Any] = field(default_factory=dict)
    instruments: list[dict[str, Any]] = field(default_factory=list)
    #: its real-world prices of risk by driver when the fit decides them (``None``: the kind's
    #: :meth:`PartKind.prices_of_risk` of its section); piecewise constant where the fitted
    #: volatility is (an index's ``premium / sigma(t)``)
    prices_of_risk: Mapping[str, float | PiecewiseConstant] | None = None
    #: its real-world risk premia by driver, recorded beside the prices of risk (``None``: none)
    risk_premia: dict[str, float] | None = None


@dataclass(frozen=True, kw_only=True)
class PartInstrumentContext:
    """What the repricing of a part's instruments may look at: today's curve, the set's column
    names and output times."""

    curve: DiscountCurve
    columns: tuple[str, ...]
    times: np.ndarray
    #: ``time_index(times, t)``: the index of output time ``t`` in ``times``, ``None`` when ``t``
    #: is not one (the validation's rule)
    time_index: Callable[[np.ndarray, float], int | None]


@dataclass(frozen=True, kw_only=True)
class PartInstrument:
    """One of a part's calibration instruments, repriced from a scenario set.

    ``value(times, columns, deflator)``: the deflated payoff per path ``(n_paths,)`` from the
    columns it names ``(n_paths, n_times)`` each and a deflator ``(n_paths, n_times)`` (the
    written one, or a density block over the cash account in the real-world set); the check
    averages it. ``market_price``: the quote's price; ``model_price``: the kind's closed form at
    the fitted parameters; ``tolerance``: the stated tolerance of the quote in price;
    ``material``: the material deviation in price (the power rule's effect). ``untestable``:
    why the files cannot reprice it (``None``: they can); ``expiry``: the last output time the
    payoff reads (an output time when testable)."""

    label: str
    kind: str
    option: str
    expiry: float
    strike: float
    columns: tuple[str, ...]
    value: Callable[[np.ndarray, dict[str, np.ndarray], np.ndarray], np.ndarray]
    market_price: float | None
    model_price: float | None
    tolerance: float
    material: float | None
    untestable: str | None = None
    convention: str = "premium"


@runtime_checkable
class PartKind(Protocol):
    """One kind of Gaussian part, plugged in through :func:`register_part`."""

    @property
    def section(self) -> str:
        """The name of its ``[parts.<section>]`` table and its ``calibration.json`` entry."""
        ...

    @property
    def config_model(self) -> type[BaseModel]: ...

    def drivers(self, section: Any) -> tuple[str, ...]:
        """Its driver names (in the correlation matrix), known before anything is fitted."""
        ...

    def build(self, section: Any, context: PartContext) -> GaussianPart: ...

    def prices_of_risk(self, section: Any) -> dict[str, float]:
        """Real-world prices of risk by driver (``{}``: none; the sets then differ only in the
        drivers correlated with it)."""
        ...

    def column_drivers(self, column: str) -> frozenset[str] | None:
        """The drivers a column of this kind depends on; ``None``: not one of its columns."""
        ...

    def martingale_assets(
        self, part: GaussianPart, curve: DiscountCurve, columns: Sequence[str]
    ) -> list[PartAsset]:
        """Its traded claims among ``columns`` (may be empty: a factor is not an asset)."""
        ...

    def describe(self, section: Any) -> str: ...


@runtime_checkable
class EntryPartKind(PartKind, Protocol):
    """A part kind whose part is written to ``calibration.json`` as one entry (a plug-in's
    ``parameters.plugin_parts.<section>``, or its own ``json_key``): every kind except one whose
    section is a sequence (``entry_list``), which writes its parts through hooks of its own."""

    def to_json(self, part: GaussianPart) -> dict[str, Any]: ...

    def from_json(self, data: dict[str, Any]) -> GaussianPart: ...


def entry_kind(kind: PartKind) -> EntryPartKind:
    """``kind`` as a kind with one ``calibration.json`` entry (an error names one without)."""
    if not isinstance(kind, EntryPartKind):
        raise TypeError(f"part kind {kind.section!r} has no single calibration.json entry (to_json / from_json)")
    return kind


#: section name -> the registered kind
PART_KINDS: dict[str, PartKind] = {}


def register_part(kind: PartKind) -> PartKind:
    """Plug a part kind in (its section becomes valid configuration); returns it."""
    if not isinstance(kind, PartKind):
        raise TypeError(f"{type(kind).__name__} is not a PartKind")
    if not (isinstance(kind, EntryPartKind) or part_entry_list(kind)):
        raise TypeError(f"{type(kind).__name__} writes no calibration.json entry: give it to_json / from_json, "
                        "or entry_list with hooks of its own")
    name = kind.section
    if name in PART_KINDS and PART_KINDS[name] is not kind:
        raise ValueError(f"a part kind named {name!r} is already registered")
    PART_KINDS[name] = kind
    if getattr(kind, "config_key", None) is None:  # a kind with a legacy top-level table has no [parts.<name>]
        register_part_section(name, kind.config_model)
    return kind


def unregister_part(section: str) -> None:
    PART_KINDS.pop(section, None)
    unregister_part_section(section)


def recorded_parts(parameters: Mapping[str, Any],
                   plugin_entries: Mapping[str, Any]) -> list[tuple[str, PartKind, Any]]:
    """The registered kinds a run's ``calibration.json`` records, ``(section, kind, entry)``:
    first those whose entry has a place of its own under ``parameters`` (a kind's ``json_key``, in
    registration order), then the plug-in entries (``plugin_entries``, by section)."""
    out: list[tuple[str, PartKind, Any]] = [
        (name, kind, parameters[key]) for name, kind in PART_KINDS.items()
        if (key := getattr(kind, "json_key", None)) is not None and parameters.get(key) is not None]
    out += [(name, PART_KINDS[name], entry) for name, entry in plugin_entries.items() if name in PART_KINDS]
    return out


def part_column_drivers(column: str, rates_drivers: Sequence[str] = ()) -> frozenset[str] | None:
    """The drivers of a column some registered kind owns, or ``None``. A kind whose columns load
    on the rate drivers too (the indices, inflation) answers through its optional hook
    ``column_drivers_on(column, rates_drivers)``; any other through ``column_drivers(column)``."""
    for kind in PART_KINDS.values():
        hook = getattr(kind, "column_drivers_on", None)
        found = hook(column, tuple(rates_drivers)) if hook is not None else kind.column_drivers(column)
        if found is not None:
            return frozenset(found)
    return None


def describe_part(section: str, recorded: Any) -> str:
    """The kind's one-line description of a part from its section, given validated or as
    recorded (a run's ``calibration.json`` inputs); an unregistered kind or a section that no
    longer validates is said so, never guessed."""
    kind = PART_KINDS.get(section)
    if kind is None:
        return f"part {section!r}: no part kind of that name is registered here"
    try:
        validated = recorded if isinstance(recorded, kind.config_model) else kind.config_model.model_validate(recorded)
    except ValueError as exc:
        return f"part {section!r}: its recorded section does not validate ({exc.__class__.__name__})"
    return kind.describe(validated)


# ---------------------------------------------------------------------- optional hooks, defaulted


def part_market_files(kind: PartKind, section: Any) -> dict[str, str]:
    """Its market-data files by name, paths as written in its section (``{}``: none)."""
    hook = getattr(kind, "market_files", None)
    return dict(hook(section)) if hook is not None else {}


def calibrate_part(kind: PartKind, section: Any, files: dict[str, Path], context: PartContext) -> PartFit:
    """The kind's own fit, or its part built from its section (no fit record, no instruments)."""
    hook = getattr(kind, "calibrate", None)
    if hook is None:
        return PartFit(part=kind.build(section, context))
    return hook(section, files, context)


def part_entry_list(kind: PartKind) -> bool:
    """Whether its configuration section is a sequence of sections, one part each (the
    total-return indices: ``[equity]`` and each ``[[indices]]`` entry); such a kind's parts are
    kept in order and its instruments are one list under its ``instruments_key``, written even
    when empty."""
    return bool(getattr(kind, "entry_list", False))


def part_fit_records(kind: PartKind, sections: Sequence[Any], fits: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Where the fit records of a list kind's parts go under ``calibration.json`` ``fit``:
    ``{key: record}`` (default: ``{fit_key: [record, ...]}``)."""
    hook = getattr(kind, "fit_records", None)
    if hook is not None:
        return dict(hook(sections, fits))
    return {part_fit_key(kind): list(fits)}


def part_fit_key(kind: PartKind) -> str:
    """Where its fit record lives under ``calibration.json`` ``fit`` (default: its section)."""
    return str(getattr(kind, "fit_key", kind.section))


def part_instruments_key(kind: PartKind) -> str:
    """Where its instruments live under ``calibration.json`` ``instruments`` (default: its section)."""
    return str(getattr(kind, "instruments_key", kind.section))


def part_instruments(kind: PartKind, records: list[dict[str, Any]],
                     context: PartInstrumentContext) -> list[PartInstrument]:
    """Its recorded instruments as the market-consistency check reprices them (``[]``: none)."""
    hook = getattr(kind, "instruments", None)
    return list(hook(records, context)) if hook is not None and records else []


def part_fit_text(kind: PartKind | None, fit: dict[str, Any], fmt: Any) -> str | None:
    """The report's fit column for a plug-in (``None``: the kind says nothing of its fit);
    ``fmt``: the report's number formatting (:mod:`pqflow.report.numbers`, handed down: the
    kinds sit below the report)."""
    hook = getattr(kind, "fit_text", None)
    return None if hook is None or not fit else str(hook(fit, fmt))


def part_report_rows(kind: PartKind, entry: dict[str, Any], fit: dict[str, Any], fmt: Any) -> list[dict[str, str]]:
    """Rows ``{part, values, fit}`` of the report's parameter table for a kind with its own entry
    (``json_key``); ``[]`` when the kind gives none."""
    hook = getattr(kind, "report_rows", None)
    return list(hook(entry, fit, fmt)) if hook is not None else []


def part_fit_lines(kind: PartKind, entry: dict[str, Any], fit: dict[str, Any], fmt: Any) -> list[str]:
    """Lines ``pqflow calibrate`` prints of the part's fit (``[]``: none)."""
    hook = getattr(kind, "fit_lines", None)
    return list(hook(entry, fit, fmt)) if hook is not None else []


def part_compare_group(kind: PartKind) -> str:
    """The group of ``pqflow compare`` its quotes are listed in (default ``parts``)."""
    return str(getattr(kind, "compare_group", "parts"))


def part_compare_quotes(kind: PartKind | None, instruments: list[dict[str, Any]],
                        fit: dict[str, Any], fmt: Any) -> dict[str, tuple[Any, str]]:
    """Its market inputs for ``pqflow compare``, ``{label: (value, unit)}`` (``{}``: none)."""
    hook = getattr(kind, "compare_quotes", None)
    return dict(hook(instruments, fit, fmt)) if hook is not None else {}


def part_compare_parameters(kind: PartKind | None, parameters: dict[str, Any]) -> dict[str, tuple[Any, str]]:
    """Its calibrated parameters for ``pqflow compare``; default: every number of its
    ``calibration.json`` form, labelled ``<section> <key>`` (unit plain)."""
    hook = getattr(kind, "compare_parameters", None)
    if hook is not None:
        return dict(hook(parameters))
    if kind is None:
        return {}
    return {f"{kind.section} {k.replace('_', ' ')}": (v, "plain") for k, v in parameters.items()
            if isinstance(v, int | float) and not isinstance(v, bool)}
