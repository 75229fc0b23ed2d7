"""``validation/summary.json``: the verdict of every check and of the run, read as typed records.

The file is the dict :func:`pqflow.validation.summary.summarise` and the checks build (each
check's entry holds the common fields below and check-specific extras), written by
:func:`pqflow.storage.jsonio.write_json_atomic`. Readers outside ``storage/`` use
:func:`read_validation_summary` (or :func:`validation_summary_from_json` for a dict in memory)
and the records' attributes; the key names are spelled here only (the builders use the
constants). Files written by older runs read too: only ``verdict`` and ``checks`` (and each
check's ``verdict``) are required, every other field is ``None`` (or its stated default) when
absent. A missing required key raises ``IntegrityError`` naming the file and the key.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json, read_json_checked

__all__ = [
    "VALIDATION_SUMMARY", "ValidationSummary", "CheckSummary", "InconclusiveSummary",
    "read_validation_summary", "validation_summary_from_json", "check_counts_toward_verdict",
    "record_sensitivity_verdicts",
    "VERDICT", "RULE", "CAUTION", "CHECKS", "INCONCLUSIVE", "DENSITIES", "DENSITY_BUDGET", "SENSITIVITIES",
    "CELLS", "INCONCLUSIVE_CELLS", "INCONCLUSIVE_FROM_TIME", "COUNTS_TOWARD_VERDICT", "FAMILY_CRITICAL_Z",
    "ESS_WARNING_SHARE", "POWER_RULE", "WEALTH_RATIO_BENCHMARK",
    "DensityAtHorizon", "UntestableInstrument", "HouseViewFit", "GuaranteeSummary",
    "WORST_CELL", "MIN_ESS_SHARE", "MAX_WEIGHT_SHARE", "AT_HORIZON", "NOT_TESTABLE", "HOUSE_VIEW_FIT", "GUARANTEE",
    "VALUES", "REAL_WORLD_SAMPLE_SE", "FAMILY_LEVEL", "KIND", "SOURCE", "WARNINGS", "REASON",
]

#: the file's path inside a run (and inside each sensitivity set)
VALIDATION_SUMMARY = "validation/summary.json"

# top-level keys
CAUTION = "caution"
VERDICT = "verdict"
RULE = "rule"
INCONCLUSIVE = "inconclusive"
CHECKS = "checks"
DENSITIES = "densities"
DENSITY_BUDGET = "density_budget"
SENSITIVITIES = "sensitivities"
# keys of a check's entry (``verdict`` and ``rule`` as above) and of ``inconclusive``
CELLS = "cells"
FROM_TIME = "from_time"
OUTSIDE_95 = "outside_95"
OUTSIDE_99 = "outside_99"
EXPECTED_OUTSIDE_95 = "expected_outside_95_by_chance"
EXPECTED_OUTSIDE_99 = "expected_outside_99_by_chance"
MAX_ABS_Z = "max_abs_z"
FAMILY_CRITICAL_Z = "family_critical_z"
INCONCLUSIVE_CELLS = "inconclusive_cells"
INCONCLUSIVE_FROM_TIME = "inconclusive_from_time"
MATERIAL_DEVIATION = "material_deviation"
POWER_RULE = "power_rule"
KIND = "kind"
SOURCE = "source"
COUNTS_TOWARD_VERDICT = "counts_toward_verdict"
WARNINGS = "warnings"
ESS_WARNING_SHARE = "ess_warning_share"
ESS_BELOW_WARNING_FROM_TIME = "ess_below_warning_from_time"
WEALTH_RATIO_BENCHMARK = "wealth_ratio_benchmark"
# check-specific keys the report reads: every check's worst cell; the density checks' ESS and
# weight shares and their state at the horizon; the market-consistency check's untestable
# instruments; the real-world check's house-view fit; the reconciliation's guarantee and values
WORST_CELL = "worst_cell"
FAMILY_LEVEL = "family_level"
#: why a check could not run (a not-applicable entry)
REASON = "reason"
MIN_ESS_SHARE = "min_ess_share"
MAX_WEIGHT_SHARE = "max_weight_share"
AT_HORIZON = "at_horizon"
NOT_TESTABLE = "not_testable"
HOUSE_VIEW_FIT = "house_view_fit"
GUARANTEE = "guarantee"
VALUES = "values"
REAL_WORLD_SAMPLE_SE = "real_world_sample_se"

_COMMON = (
    VERDICT, CELLS, OUTSIDE_95, OUTSIDE_99, EXPECTED_OUTSIDE_95, EXPECTED_OUTSIDE_99, MAX_ABS_Z, FAMILY_CRITICAL_Z,
    INCONCLUSIVE_CELLS, INCONCLUSIVE_FROM_TIME, MATERIAL_DEVIATION, POWER_RULE, KIND, SOURCE, RULE,
    COUNTS_TOWARD_VERDICT, WARNINGS,
)


def check_counts_toward_verdict(entry: Mapping[str, Any], default: bool = True) -> bool:
    """Whether a check's entry (or a nested result such as the wealth-ratio benchmark, whose
    default is ``False``) counts toward the verdict; ``default`` when the entry does not say."""
    return bool(entry.get(COUNTS_TOWARD_VERDICT, default))


@dataclass(frozen=True)
class DensityAtHorizon:
    """A density check's state at the horizon (``at_horizon``), each value as written (``None``
    when absent)."""

    time: Any = None
    mean_weight: Any = None
    std_error: Any = None
    ess_share: Any = None
    max_weight_share: Any = None


@dataclass(frozen=True)
class UntestableInstrument:
    """An instrument the market-consistency check could not test from the files, and why."""

    instrument: Any = None
    reason: Any = None


@dataclass(frozen=True)
class HouseViewFit:
    """How far the model's real-world expectation lies from the house-view path (``house_view_fit``)."""

    quantity: Any = None
    max_abs_gap_bp: Any = None
    note: Any = None


@dataclass(frozen=True)
class GuaranteeSummary:
    """The reconciliation's maturity guarantee (``guarantee``), each value as written."""

    product: Any = ""
    maturity: Any = None
    guaranteed_amount: Any = None
    index_level: Any = None


def _mapping(value: Any) -> Mapping[str, Any]:
    return value if isinstance(value, Mapping) else {}


@dataclass(frozen=True)
class CheckSummary:
    """One entry of ``checks``: the common fields typed (``None`` when an older run lacks them),
    the check-specific extras as a read-only mapping (:attr:`extras`), the whole entry as
    :attr:`entry`."""

    name: str
    verdict: str | None  # None only for :meth:`absent`
    cells: int | None = None
    outside_95: int | None = None
    outside_99: int | None = None
    expected_outside_95_by_chance: float | None = None
    expected_outside_99_by_chance: float | None = None
    max_abs_z: float | None = None
    family_critical_z: float | None = None
    inconclusive_cells: int | None = None
    inconclusive_from_time: float | None = None
    material_deviation: Any = None
    power_rule: str | None = None
    kind: str | None = None
    source: str | None = None
    rule: str | None = None
    counts_toward_verdict: bool = True
    warnings: tuple[Any, ...] = ()
    entry: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}), repr=False)

    @property
    def extras(self) -> Mapping[str, Any]:
        """The check-specific fields (everything but the common ones)."""
        return MappingProxyType({k: v for k, v in self.entry.items() if k not in _COMMON})

    @property
    def ess_warning_share(self) -> float | None:
        """The ESS share below which a density check warned (density checks)."""
        value = self.entry.get(ESS_WARNING_SHARE)
        return None if value is None else value

    @property
    def wealth_ratio_benchmark(self) -> Mapping[str, Any] | None:
        """The real-world check's wealth-ratio benchmark result (reported beside the check)."""
        return self.entry.get(WEALTH_RATIO_BENCHMARK)

    @property
    def ess_below_warning_from_time(self) -> float | None:
        """When the full density's ESS share fell below the warning share (density checks)."""
        return self.entry.get(ESS_BELOW_WARNING_FROM_TIME)

    @property
    def worst_cell(self) -> Mapping[str, Any]:
        """The cell furthest from its reference (its columns depend on the check); empty if none."""
        return _mapping(self.entry.get(WORST_CELL))

    @property
    def min_ess_share(self) -> float | None:
        """The lowest effective-sample-size share over time (density checks)."""
        return self.entry.get(MIN_ESS_SHARE)

    @property
    def max_weight_share(self) -> float | None:
        """The largest single-path weight share over time (density checks)."""
        return self.entry.get(MAX_WEIGHT_SHARE)

    @property
    def at_horizon(self) -> DensityAtHorizon:
        """A density check's state at the horizon (every value ``None`` when not recorded)."""
        at = _mapping(self.entry.get(AT_HORIZON))
        return DensityAtHorizon(time=at.get("time"), mean_weight=at.get("mean_weight"),
                                std_error=at.get("std_error"), ess_share=at.get("ess_share"),
                                max_weight_share=at.get(MAX_WEIGHT_SHARE))

    @property
    def not_testable(self) -> tuple[UntestableInstrument, ...]:
        """The instruments the market-consistency check could not test, with the reason."""
        return tuple(UntestableInstrument(instrument=u.get("instrument"), reason=u.get("reason"))
                     for u in (self.entry.get(NOT_TESTABLE) or []) if isinstance(u, Mapping))

    @property
    def house_view_fit(self) -> HouseViewFit | None:
        """The real-world check's house-view fit, ``None`` when not recorded."""
        fit = self.entry.get(HOUSE_VIEW_FIT)
        if not fit or not isinstance(fit, Mapping):
            return None
        return HouseViewFit(quantity=fit.get("quantity"), max_abs_gap_bp=fit.get("max_abs_gap_bp"),
                            note=fit.get("note"))

    @property
    def guarantee(self) -> GuaranteeSummary | None:
        """The reconciliation's guarantee, ``None`` when not recorded."""
        g = self.entry.get(GUARANTEE)
        if not g or not isinstance(g, Mapping):
            return None
        return GuaranteeSummary(product=g.get("product", ""), maturity=g.get("maturity"),
                                guaranteed_amount=g.get("guaranteed_amount"), index_level=g.get("index_level"))

    @property
    def real_world_sample_se(self) -> float | None:
        """The reconciliation's real-world sample standard error (``values``), ``None`` if absent."""
        return _mapping(self.entry.get(VALUES)).get(REAL_WORLD_SAMPLE_SE)

    @property
    def rule_text(self) -> str:
        """The check's rule as the report prints it (``""`` when the entry has none)."""
        return str(self.entry.get(RULE, ""))

    def ess_warning_share_or(self, default: Any) -> Any:
        """The entry's ESS warning share as written, ``default`` when the entry has none."""
        return self.entry.get(ESS_WARNING_SHARE, default)

    @classmethod
    def absent(cls, name: str) -> CheckSummary:
        """A check the run does not have (a run older than it): no verdict, no fields."""
        return cls(name=name, verdict=None)

    def critical_z(self, default: float) -> float:
        """The family critical |z|, ``default`` when the entry lacks it (or holds 0/null)."""
        return float(self.family_critical_z or default)

    @classmethod
    def from_json(cls, name: str, entry: Mapping[str, Any], *, where: str = "validation/summary.json"
                  ) -> CheckSummary:
        if not isinstance(entry, Mapping):
            raise IntegrityError(f"{where}: checks.{name} is not an object")
        if VERDICT not in entry:
            raise IntegrityError(f"{where}: checks.{name} has no key {VERDICT!r}")
        warnings = entry.get(WARNINGS)
        return cls(
            name=name, verdict=entry[VERDICT], cells=entry.get(CELLS), outside_95=entry.get(OUTSIDE_95),
            outside_99=entry.get(OUTSIDE_99), expected_outside_95_by_chance=entry.get(EXPECTED_OUTSIDE_95),
            expected_outside_99_by_chance=entry.get(EXPECTED_OUTSIDE_99), max_abs_z=entry.get(MAX_ABS_Z),
            family_critical_z=entry.get(FAMILY_CRITICAL_Z), inconclusive_cells=entry.get(INCONCLUSIVE_CELLS),
            inconclusive_from_time=entry.get(INCONCLUSIVE_FROM_TIME), material_deviation=entry.get(MATERIAL_DEVIATION),
            power_rule=entry.get(POWER_RULE), kind=entry.get(KIND), source=entry.get(SOURCE), rule=entry.get(RULE),
            counts_toward_verdict=check_counts_toward_verdict(entry),
            warnings=tuple(warnings) if isinstance(warnings, list | tuple) else (),
            entry=MappingProxyType(dict(entry)),
        )


@dataclass(frozen=True)
class InconclusiveSummary:
    """``inconclusive``: cells that cannot be judged over the checks that count, from when."""

    cells: int
    from_time: float | None
    checks: tuple[str, ...]


@dataclass(frozen=True)
class ValidationSummary:
    """``validation/summary.json`` of a run (or of a sensitivity set)."""

    verdict: str
    checks: Mapping[str, CheckSummary]
    rule: str | None = None
    caution: str | None = None
    inconclusive: InconclusiveSummary | None = None
    #: usable horizon of every density column, each a read-only mapping as written (``None`` for a
    #: run written before it was recorded)
    densities: tuple[Any, ...] | None = None
    density_budget: Mapping[str, Any] | None = None
    #: the sensitivity sets' verdicts (runs with ``[[sensitivities]]``)
    sensitivities: Mapping[str, Any] | None = None
    document: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}), repr=False)

    def check(self, name: str) -> CheckSummary | None:
        """The check ``name``, or ``None`` when the run has none of that name."""
        return self.checks.get(name)

    def check_or_absent(self, name: str) -> CheckSummary:
        """The check ``name``, or :meth:`CheckSummary.absent` when the run has none of that name."""
        return self.checks.get(name) or CheckSummary.absent(name)

    def check_entry(self, name: str) -> Mapping[str, Any] | None:
        """The whole entry of check ``name`` as written (extras included), or ``None``."""
        c = self.checks.get(name)
        return None if c is None else c.entry

    def to_json(self) -> dict[str, Any]:
        """The file's content as written (a plain, JSON-safe dict)."""
        import json

        return json.loads(json.dumps(self.document, default=dict))

    @classmethod
    def from_json(cls, data: Any, *, where: str = VALIDATION_SUMMARY) -> ValidationSummary:
        if not isinstance(data, Mapping):
            raise IntegrityError(f"{where}: not a JSON object")
        for key in (VERDICT, CHECKS):
            if key not in data:
                raise IntegrityError(f"{where}: no key {key!r}; not a pqflow validation summary")
        if not isinstance(data[CHECKS], Mapping):
            raise IntegrityError(f"{where}: key {CHECKS!r} is not an object")
        checks = {n: CheckSummary.from_json(n, c, where=where) for n, c in data[CHECKS].items()}
        inc = data.get(INCONCLUSIVE)
        inconclusive = None
        if isinstance(inc, Mapping):
            inconclusive = InconclusiveSummary(cells=inc.get(CELLS) or 0, from_time=inc.get(FROM_TIME),
                                               checks=tuple(inc.get(CHECKS) or ()))
        dens = data.get(DENSITIES)
        return cls(
            verdict=data[VERDICT], checks=MappingProxyType(checks), rule=data.get(RULE), caution=data.get(CAUTION),
            inconclusive=inconclusive,
            densities=tuple(MappingProxyType(dict(d)) for d in dens) if isinstance(dens, list) else None,
            density_budget=data.get(DENSITY_BUDGET), sensitivities=data.get(SENSITIVITIES),
            document=MappingProxyType(dict(data)),
        )


def validation_summary_from_json(data: Any, *, where: str = VALIDATION_SUMMARY) -> ValidationSummary:
    """The record of a summary held in memory (as :func:`pqflow.validation.summary.summarise` and
    the checks build it); ``where`` names it in errors."""
    return ValidationSummary.from_json(data, where=where)


def read_validation_summary(path: str | Path) -> ValidationSummary:
    """Read a ``summary.json`` of a run's validation (``IntegrityError`` naming the file and the key
    when it is damaged or lacks a required key)."""
    path = Path(path)
    data = read_json_checked(path)
    return ValidationSummary.from_json(data, where=str(path))


def record_sensitivity_verdicts(path: str | Path, verdicts: Mapping[str, str], summaries: Mapping[str, str]
                                ) -> dict[str, Any]:
    """Add the sensitivity sets' verdicts to a run's ``summary.json`` (``summaries``: each set's own
    summary file, relative to the run); a failed set fails the run. Returns the updated content."""
    from pqflow.storage.jsonio import write_json_atomic

    path = Path(path)
    summary = read_json(path)
    ValidationSummary.from_json(summary, where=str(path))  # the file is a summary before it is changed
    summary[SENSITIVITIES] = {name: {VERDICT: verdict, "summary": summaries[name]}
                              for name, verdict in verdicts.items()}
    if any(v[VERDICT] == "fail" for v in summary[SENSITIVITIES].values()):
        summary[VERDICT] = "fail"
    write_json_atomic(path, summary)
    return summary
