"""``sensitivities/index.json``: the sensitivity sets of a run, written and read here.

:func:`sensitivity_index_document` builds the file's content (the job writes it), and
:func:`read_sensitivity_index` reads it as :class:`SensitivityIndex`; the key names are spelled
here only. A missing required key raises ``IntegrityError`` naming the file and the key.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json_checked

__all__ = [
    "SENSITIVITY_DIR", "SENSITIVITY_INDEX", "SensitivityIndex", "SensitivityEntry", "read_sensitivity_index",
    "sensitivity_index_document", "sensitivity_index_entry", "sensitivity_index_path",
]

#: the folder of a run holding one sub-folder per sensitivity set
SENSITIVITY_DIR = "sensitivities"
SENSITIVITY_INDEX = "index.json"
NOTE = "note"
SENSITIVITIES = "sensitivities"
NAME = "name"
PATH = "path"
MEASURES = "measures"
VERDICT = "verdict"
INDEX_NOTE = "one set per [[sensitivities]] entry, simulated with the base run's seeds (common random numbers)"


def sensitivity_index_path(run_dir: str | Path) -> Path:
    return Path(run_dir) / SENSITIVITY_DIR / SENSITIVITY_INDEX


@dataclass(frozen=True)
class SensitivityEntry:
    """One set: its name, its folder relative to the run, and the rest as written."""

    name: str
    path: str | None
    measures: tuple[str, ...]
    verdict: str | None
    entry: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}), repr=False)


@dataclass(frozen=True)
class SensitivityIndex:
    sensitivities: tuple[SensitivityEntry, ...]
    note: str | None = None

    @property
    def names(self) -> list[str]:
        return [s.name for s in self.sensitivities]

    @classmethod
    def from_json(cls, data: Any, *, where: str = SENSITIVITY_INDEX) -> SensitivityIndex:
        if not isinstance(data, Mapping) or not isinstance(data.get(SENSITIVITIES), list):
            raise IntegrityError(f"{where}: key {SENSITIVITIES!r} is missing or not a list")
        entries = []
        for i, s in enumerate(data[SENSITIVITIES]):
            if not isinstance(s, Mapping) or NAME not in s:
                raise IntegrityError(f"{where}: {SENSITIVITIES}[{i}] has no key {NAME!r}")
            entries.append(SensitivityEntry(name=s[NAME], path=s.get(PATH), measures=tuple(s.get(MEASURES) or ()),
                                            verdict=s.get(VERDICT), entry=MappingProxyType(dict(s))))
        return cls(sensitivities=tuple(entries), note=data.get(NOTE))


def sensitivity_index_entry(*, name: str, description: str | None, measures: Sequence[str],
                            keep_volatility_parameters: bool, shocks: Mapping[str, Any], verdict: str
                            ) -> dict[str, Any]:
    """One set's object in the index, its folder ``sensitivities/<name>`` relative to the run."""
    return {
        NAME: name,
        "description": description,
        PATH: f"{SENSITIVITY_DIR}/{name}",
        MEASURES: list(measures),
        "keep_volatility_parameters": keep_volatility_parameters,
        "shocks": dict(shocks),
        VERDICT: verdict,
    }


def sensitivity_index_document(entries: Sequence[Mapping[str, Any]]) -> dict[str, Any]:
    """The file's content: the note, then one object per set in configuration order, each with
    ``name``, ``description``, ``path``, ``measures``, ``keep_volatility_parameters``, ``shocks``
    and ``verdict`` (:func:`sensitivity_index_entry`)."""
    return {NOTE: INDEX_NOTE, SENSITIVITIES: [dict(e) for e in entries]}


def read_sensitivity_index(run_dir: str | Path) -> SensitivityIndex | None:
    """The index of a run's sensitivity sets, ``None`` when the run has none."""
    path = sensitivity_index_path(run_dir)
    if not path.is_file():
        return None
    data = read_json_checked(path)
    return SensitivityIndex.from_json(data, where=str(path))
