"""Part plug-ins: one class per kind of Gaussian part gives everything a run needs of it.

A part kind (:class:`PartKind`) names its configuration section (``[parts.<section>]``, a pydantic
model), its drivers, how it is built from that section and today's market (:class:`PartContext`:
the curve, the rates model, the driver correlation), its ``calibration.json`` form, which
drivers each of its columns depends on, its martingale assets (possibly none) and a one-line
description. :func:`register_part` puts a kind in :data:`PART_KINDS` (and its section model in
the configuration's table); the configuration, the calibration and its file, the density blocks
and the martingale test consult the registry, so the engine, the densities and the storage need
no code of the part. The existing parts (indices, inflation, credit, Heston) predate the
registry and keep their own code paths.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any, Protocol, runtime_checkable

import numpy as np
from pydantic import BaseModel

from pqflow.config.part_sections import register_part_section, unregister_part_section
from pqflow.market.curve import DiscountCurve
from pqflow.models.economy import GaussianPart
from pqflow.models.rates import RatesModel

__all__ = [
    "PART_KINDS",
    "PartAsset",
    "PartContext",
    "PartKind",
    "describe_part",
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

    def to_json(self, part: GaussianPart) -> dict[str, Any]: ...

    def from_json(self, data: dict[str, Any]) -> GaussianPart: ...

    def column_drivers(self, column: str) -> frozenset[str] | None:
        """The drivers a column of this kind depends on; ``None``: not one of its columns."""
        ...

    def martingale_assets(
        self, part: GaussianPart, curve: DiscountCurve, columns: Sequence[str]
    ) -> list[PartAsset]:
        """Its traded claims among ``columns`` (may be empty: a factor is not an asset)."""
        ...

    def describe(self, section: Any) -> str: ...


#: section name -> the registered kind
PART_KINDS: dict[str, PartKind] = {}


def register_part(kind: PartKind) -> PartKind:
    """Plug a part kind in (its section becomes valid configuration); returns it."""
    if not isinstance(kind, PartKind):
        raise TypeError(f"{type(kind).__name__} is not a PartKind")
    name = kind.section
    if name in PART_KINDS and PART_KINDS[name] is not kind:
        raise ValueError(f"a part kind named {name!r} is already registered")
    PART_KINDS[name] = kind
    register_part_section(name, kind.config_model)
    return kind


def unregister_part(section: str) -> None:
    PART_KINDS.pop(section, None)
    unregister_part_section(section)


def part_column_drivers(column: str) -> frozenset[str] | None:
    """The drivers of a column some registered kind owns, or ``None``."""
    for kind in PART_KINDS.values():
        found = kind.column_drivers(column)
        if found is not None:
            return found
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
