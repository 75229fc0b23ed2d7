"""``valuation/summary.json``: what ``pqflow value`` found, read as typed records.

The liabilities package builds the dict (:func:`pqflow.liabilities.job.publish_valuation`);
readers outside ``storage/`` use :func:`read_valuation_summary` (or
:func:`valuation_summary_from_json` for the dict in memory) and the records' attributes. Only
``lines`` is required (each line's ``name``); every other field is ``None`` when an older
valuation lacks it. A missing required key raises ``IntegrityError`` naming the file and key.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json_checked

__all__ = [
    "VALUATION_SUMMARY", "ValuationSummary", "ValuationLine", "read_valuation_summary",
    "valuation_summary_from_json", "MARKET_CONSISTENT", "CERTAINTY_EQUIVALENT",
    "ValuationReconciliation", "SensitivityChange", "SensitivityTotals", "SENSITIVITY_QUANTITIES",
]

#: the file's path inside a run
VALUATION_SUMMARY = "valuation/summary.json"

LINES = "lines"
NAME = "name"
LEVEL = "level"
QUANTITY = "quantity"
RECONCILIATION = "reconciliation"
SENSITIVITIES = "sensitivities"
#: the two values a line's best estimate is read by (``<kind>_value``)
MARKET_CONSISTENT = "market_consistent"
CERTAINTY_EQUIVALENT = "certainty_equivalent"
_WITHOUT_CONTROLS = "_without_controls"


@dataclass(frozen=True)
class ValuationLine:
    """One entry of ``lines``: a product or total line (or a model point) and one quantity."""

    name: str
    level: str | None
    quantity: str | None
    market_consistent_value: float | None = None
    market_consistent_se: float | None = None
    certainty_equivalent_value: float | None = None
    tvog: float | None = None
    tvog_se: float | None = None
    real_world_value: float | None = None
    real_world_se: float | None = None
    difference_in_se: float | None = None
    #: the density column(s) that deflate the line in the real-world set
    real_world_density: str | None = None
    entry: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}), repr=False)

    @classmethod
    def from_json(cls, line: Mapping[str, Any]) -> ValuationLine:
        g = line.get
        return cls(name=line[NAME], level=g(LEVEL), quantity=g(QUANTITY),
                   market_consistent_value=g("market_consistent_value"), market_consistent_se=g("market_consistent_se"),
                   certainty_equivalent_value=g("certainty_equivalent_value"), tvog=g("tvog"),
                   tvog_se=g("tvog_se", g("market_consistent_se")), real_world_value=g("real_world_value"),
                   real_world_se=g("real_world_se"), difference_in_se=g("difference_in_se"),
                   real_world_density=g("real_world_density"), entry=MappingProxyType(dict(line)))

    def value(self, kind: str) -> float:
        """``<kind>_value`` (``kind``: :data:`MARKET_CONSISTENT` or :data:`CERTAINTY_EQUIVALENT`)."""
        return float(self.entry[f"{kind}_value"])

    def plain_value(self, kind: str) -> float:
        """The plain mean of ``<kind>_value`` where one is recorded (``..._without_controls``; the
        published value then carries control variates), else the value."""
        key = f"{kind}_value"
        plain = key + _WITHOUT_CONTROLS
        return float(self.entry[plain] if plain in self.entry else self.entry[key])


@dataclass(frozen=True)
class ValuationReconciliation:
    """``reconciliation``: whether the two sets' values of each line agree (``verdict``: agree,
    differ or inconclusive), the rule, the lines that cannot be judged and the material share."""

    verdict: str | None = None
    rule: str | None = None
    inconclusive_lines: tuple[str, ...] = ()
    material_share: float | None = None
    worst_line: str | None = None
    max_abs_difference_in_se: float | None = None

    @classmethod
    def from_json(cls, rec: Mapping[str, Any]) -> ValuationReconciliation:
        return cls(verdict=rec.get("verdict"), rule=rec.get("rule"),
                   inconclusive_lines=tuple(rec.get("inconclusive_lines") or ()),
                   material_share=rec.get("material_share"), worst_line=rec.get("worst_line"),
                   max_abs_difference_in_se=rec.get("max_abs_difference_in_se"))


#: the quantities a sensitivity's total line records, in the order the tables show them
SENSITIVITY_QUANTITIES = ("best_estimate", "guarantee", "tvog")


@dataclass(frozen=True)
class SensitivityChange:
    """One quantity of a sensitivity's total line: its value, the change from the base, and the
    change's standard error on the common scenarios and from independent sets."""

    value: float
    change: float
    change_se_paired: float | None = None
    change_se_independent: float | None = None


@dataclass(frozen=True)
class SensitivityTotals:
    """``sensitivities[i]``: the total line's changes of one sensitivity, by quantity (a
    quantity the entry lacks is absent from :attr:`changes`)."""

    sensitivity: str
    changes: Mapping[str, SensitivityChange]

    def change(self, quantity: str, where: str = VALUATION_SUMMARY) -> SensitivityChange:
        """The change of ``quantity``; ``IntegrityError`` naming the file and key when absent."""
        if quantity not in self.changes:
            raise IntegrityError(f"{where}: sensitivities.{self.sensitivity} has no key {quantity!r}")
        return self.changes[quantity]

    @classmethod
    def from_json(cls, entry: Any, where: str, i: int) -> SensitivityTotals:
        if not isinstance(entry, Mapping) or "sensitivity" not in entry:
            raise IntegrityError(f"{where}: {SENSITIVITIES}[{i}] has no key 'sensitivity'")
        changes = {}
        for q in SENSITIVITY_QUANTITIES:
            if q not in entry:
                continue
            c = entry[q]
            for key in ("value", "change"):
                if not isinstance(c, Mapping) or key not in c:
                    raise IntegrityError(f"{where}: {SENSITIVITIES}[{i}].{q} has no key {key!r}")
            changes[q] = SensitivityChange(value=c["value"], change=c["change"],
                                           change_se_paired=c.get("change_se_paired"),
                                           change_se_independent=c.get("change_se_independent"))
        return cls(sensitivity=str(entry["sensitivity"]), changes=MappingProxyType(changes))


@dataclass(frozen=True)
class ValuationSummary:
    """``valuation/summary.json``."""

    lines: tuple[ValuationLine, ...]
    currency: str | None = None
    insurer: str | None = None
    run_id: str | None = None
    valuation_date: str | None = None
    portfolio_file: str | None = None
    #: the reconciliation of the two sets (``verdict``, ``rule``, ...), as written
    reconciliation: dict[str, Any] | None = None
    #: per sensitivity, the total line's changes, as written
    sensitivities: list[dict[str, Any]] | None = None
    #: the files written beside it (relative to the valuation folder)
    files: Any = None
    #: the conventions the values follow, one sentence each
    conventions: tuple[str, ...] = ()
    document: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}), repr=False)
    #: the file (or the in-memory summary) errors name
    source: str = VALUATION_SUMMARY

    def best_estimates(self, kind: str, *, plain: bool = True) -> dict[str, float]:
        """Best estimate per product and total line (``kind`` as :meth:`ValuationLine.value`);
        ``plain``: the plain means (:meth:`ValuationLine.plain_value`)."""
        return {line.name: (line.plain_value(kind) if plain else line.value(kind)) for line in self.lines
                if line.quantity == "best_estimate" and line.level in ("product", "total")}

    @property
    def reconciled(self) -> ValuationReconciliation | None:
        """The reconciliation, typed (``None`` when the valuation records none)."""
        rec = self.reconciliation
        return None if not isinstance(rec, Mapping) else ValuationReconciliation.from_json(rec)

    @property
    def sensitivity_totals(self) -> tuple[SensitivityTotals, ...]:
        """Each sensitivity's total-line changes, typed (empty when none); a missing value or
        change raises ``IntegrityError`` naming the file and the key."""
        return tuple(SensitivityTotals.from_json(e, self.source, i) for i, e in enumerate(self.sensitivities or []))

    def line_entries(self) -> list[Mapping[str, Any]]:
        """Every line as written (the report's tables show them column by column)."""
        return [line.entry for line in self.lines]

    @classmethod
    def from_json(cls, data: Any, *, where: str = VALUATION_SUMMARY) -> ValuationSummary:
        if not isinstance(data, Mapping):
            raise IntegrityError(f"{where}: not a JSON object")
        if not isinstance(data.get(LINES), list):
            raise IntegrityError(f"{where}: key {LINES!r} is missing or not a list; not a pqflow valuation summary")
        lines = []
        for i, line in enumerate(data[LINES]):
            if not isinstance(line, Mapping) or NAME not in line:
                raise IntegrityError(f"{where}: {LINES}[{i}] has no key {NAME!r}")
            lines.append(ValuationLine.from_json(line))
        g = data.get
        return cls(lines=tuple(lines), currency=g("currency"), insurer=g("insurer"), run_id=g("run_id"),
                   valuation_date=g("valuation_date"), portfolio_file=g("portfolio_file"),
                   reconciliation=g(RECONCILIATION), sensitivities=g(SENSITIVITIES), files=g("files"),
                   conventions=tuple(g("conventions") or ()),
                   document=MappingProxyType(dict(data)), source=where)


def valuation_summary_from_json(data: Any, *, where: str = VALUATION_SUMMARY) -> ValuationSummary:
    """The record of a valuation summary held in memory (as ``pqflow value`` returns it)."""
    return ValuationSummary.from_json(data, where=where)


def read_valuation_summary(path: str | Path) -> ValuationSummary:
    """Read a run's ``valuation/summary.json`` (``IntegrityError`` naming the file and the key
    when it is damaged or lacks a required key)."""
    path = Path(path)
    data = read_json_checked(path)
    return ValuationSummary.from_json(data, where=str(path))
