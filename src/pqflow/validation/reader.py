"""Reading a written scenario set part by part as ``(n_paths, n_times)`` arrays."""

from __future__ import annotations

import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from pqflow.errors import IntegrityError
from pqflow.storage.manifest import MANIFEST, listed_parts
from pqflow.storage.parquet import part_metadata, part_paths, read_part

__all__ = ["ScenarioSetReader"]


@dataclass(frozen=True, kw_only=True)
class ScenarioSetReader:
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
            table = read_part(path, ["scenario", "time", *columns])
            scen = table.column("scenario").to_numpy()
            n_times = int(np.searchsorted(scen, scen[0], side="right"))
            if n_times == 0 or scen.size % n_times:
                raise IntegrityError(f"{path}: rows are not a whole number of scenarios")
            n_paths = scen.size // n_times
            grid = scen.reshape(n_paths, n_times)
            if np.any(grid != grid[:, :1]):
                raise IntegrityError(f"{path}: rows are not ordered by scenario, then time")
            times = table.column("time").to_numpy()[:n_times]
            yield times, {c: table.column(c).to_numpy().reshape(n_paths, n_times) for c in columns}
