"""Plain CSV tables (a header row, then text cells) read and written as they are: for copies of
market-data files with some cells changed (sensitivity shocks), so every other cell keeps its
exact text."""

from __future__ import annotations

import csv
import os
from pathlib import Path

from pqflow.errors import MarketDataError

__all__ = ["read_csv_table", "write_csv_table"]


def read_csv_table(path: str | Path) -> tuple[list[str], list[list[str]]]:
    """``(header, rows)``, cells stripped, blank lines skipped."""
    path = Path(path)
    try:
        with path.open(newline="", encoding="utf-8-sig") as fh:
            lines = [[c.strip() for c in row] for row in csv.reader(fh) if row and any(c.strip() for c in row)]
    except FileNotFoundError:
        raise MarketDataError(f"{path}: file not found") from None
    except (UnicodeDecodeError, csv.Error) as exc:
        raise MarketDataError(f"{path}: not a readable UTF-8 CSV file ({exc})") from None
    if not lines:
        raise MarketDataError(f"{path}: the file is empty (a header row is expected)")
    return lines[0], lines[1:]


def write_csv_table(path: str | Path, header: list[str], rows: list[list[str]]) -> Path:
    """Write through a temporary name renamed into place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with tmp.open("w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh, lineterminator="\n")
            writer.writerow(header)
            writer.writerows(rows)
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path
