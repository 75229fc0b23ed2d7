"""Reading a written scenario set part by part as ``(n_paths, n_times)`` arrays, and one pass
over its parts that feeds many readers at once.

A check over a set needs a few columns of every part. Read check by check, the same part is
decoded once per check; :class:`SetPass` collects what every reader needs first and then
decodes each part once (the union of their columns), handing each reader its own columns of
that part, in part order. A reader sees exactly the arrays it would have read alone, so what
it computes from them is the same to the last bit.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from pqflow.errors import IntegrityError
from pqflow.storage.manifest import MANIFEST, listed_parts
from pqflow.storage.parquet import part_metadata, part_paths, read_part

__all__ = ["ScenarioSet", "SetPass", "PartFeed"]

#: What a reader of a pass gets for each part: the output times ``(n_times,)`` and its columns,
#: each ``(n_paths, n_times)``.
PartFeed = Callable[[np.ndarray, dict[str, np.ndarray]], None]


@dataclass(frozen=True, kw_only=True)
class ScenarioSet:
    """One scenario set of a run: ``run_dir/scenarios/<measure>/``."""

    run_dir: Path
    measure: str

    @property
    def set_dir(self) -> Path:
        return Path(self.run_dir) / "scenarios" / self.measure

    def parts(self) -> list[Path]:
        """A finished run's parts are those its manifest lists (nothing copied in beside them);
        a run still being built (no manifest yet) has the parts in its folder."""
        if (Path(self.run_dir) / MANIFEST).is_file():
            parts = listed_parts(self.run_dir, self.measure)
        else:
            parts = part_paths(self.set_dir)
        if not parts:
            raise IntegrityError(f"{self.set_dir}: no scenario parts found")
        return parts

    def metadata(self) -> dict[str, str]:
        return part_metadata(self.parts()[0])

    @property
    def antithetic(self) -> bool:
        return self.metadata().get("pqflow.antithetic") == "true"

    def column_names(self) -> list[str]:
        import pyarrow.parquet as pq

        return list(pq.read_schema(self.parts()[0]).names)

    def units(self) -> dict[str, str]:
        return json.loads(self.metadata().get("pqflow.units", "{}"))

    def density_blocks(self) -> dict[str, tuple[str, ...]]:
        """The restricted densities the set carries: block name -> its drivers (empty for runs
        written before blocks existed). Only blocks whose column is in the files are listed."""
        raw = self.metadata().get("pqflow.density_blocks")
        if not raw:
            return {}
        try:
            blocks = {str(k): tuple(str(d) for d in v) for k, v in json.loads(raw).items()}
        except (ValueError, AttributeError, TypeError):
            raise IntegrityError(f"{self.set_dir}: unreadable pqflow.density_blocks metadata") from None
        prefix = "q_density_" if self.measure == "real_world" else "p_density_"
        names = set(self.column_names())
        return {k: v for k, v in blocks.items() if prefix + k in names}

    def iter_arrays(self, columns: Sequence[str]) -> Iterator[tuple[np.ndarray, dict[str, np.ndarray]]]:
        """Yield ``(times, {column: (n_paths, n_times)})`` for each part, in batch order."""
        for path in self.parts():
            yield _arrays(path, read_part(path, ["scenario", "time", *columns]), columns)

    def head(self, columns: Sequence[str] = ()) -> tuple[np.ndarray, dict[str, float]]:
        """The output times and the first scenario's value of ``columns`` at time 0, read from
        the first row group of the first part only (a check's set-up before a pass)."""
        import pyarrow.parquet as pq

        path = self.parts()[0]
        table = pq.ParquetFile(path).read_row_group(0, columns=["scenario", "time", *columns])
        scen = table.column("scenario").to_numpy()
        n_times = int(np.searchsorted(scen, scen[0], side="right"))
        if n_times == 0:
            raise IntegrityError(f"{path}: no rows")
        times = table.column("time").to_numpy()[:n_times]
        return times, {c: float(table.column(c)[0].as_py()) for c in columns}


def _arrays(path: Path, table, columns: Sequence[str]) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    scen = table.column("scenario").to_numpy()
    n_times = int(np.searchsorted(scen, scen[0], side="right"))
    if n_times == 0 or scen.size % n_times:
        raise IntegrityError(f"{path}: rows are not a whole number of scenarios")
    n_paths = scen.size // n_times
    grid = scen.reshape(n_paths, n_times)
    if np.any(grid != grid[:, :1]):
        raise IntegrityError(f"{path}: rows are not ordered by scenario, then time")
    times = table.column("time").to_numpy()[:n_times]
    return times, {c: table.column(c).to_numpy().reshape(n_paths, n_times) for c in columns}


@dataclass
class SetPass:
    """Readers of one set, fed by a single read of each part.

    ``add(columns, feed)`` registers a reader; :meth:`run` reads each part once with the union
    of the registered columns and calls every ``feed(times, cols)`` with its own columns, in
    registration order, part after part. A pass with no reader reads nothing."""

    scenario_set: ScenarioSet
    _readers: list[tuple[tuple[str, ...], PartFeed]] = field(default_factory=list)

    def add(self, columns: Sequence[str], feed: PartFeed) -> None:
        self._readers.append((tuple(dict.fromkeys(columns)), feed))

    def run(self) -> int:
        """Read the parts and feed the readers; returns the number of parts read."""
        readers, self._readers = self._readers, []
        if not readers:
            return 0
        union = list(dict.fromkeys(c for cols, _ in readers for c in cols))
        n = 0
        for times, cols in self.scenario_set.iter_arrays(union):
            for columns, feed in readers:
                feed(times, {c: cols[c] for c in columns})
            n += 1
        if n == 0:
            raise IntegrityError(f"{self.scenario_set.set_dir}: no scenario parts found")
        return n
