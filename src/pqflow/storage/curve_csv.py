"""Writing a tabulated curve (:func:`pqflow.market.curve_table.curve_table`) as CSV."""

from __future__ import annotations

import csv
import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np

__all__ = ["write_curve_csv"]


def write_curve_csv(path: str | Path, table: Mapping[str, np.ndarray]) -> Path:
    """Write the columns of ``table`` (one row per maturity, full precision ``repr`` of each
    float) to ``path`` through a temporary file renamed into place, so a failed write leaves no
    half file."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    names = list(table)
    n = len(table[names[0]])
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with tmp.open("w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            writer.writerow(names)
            for i in range(n):
                writer.writerow([_cell(name, table[name][i]) for name in names])
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def _cell(name: str, value: float) -> str:
    if name == "maturity_years" and float(value).is_integer():
        return str(int(value))
    return repr(float(value))
