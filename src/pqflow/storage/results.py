"""Result tables (Parquet and CSV) written atomically: temporary name in the same folder, then
``os.replace``, so a reader never sees a half-written file under its final name."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from pqflow.storage.jsonio import write_json_atomic
from pqflow.storage.oserror import naming

__all__ = ["write_parquet_atomic", "write_csv_atomic", "write_result_tables"]


def _tmp(path: Path) -> Path:
    return path.with_name(f".{path.name}.tmp-{os.getpid()}")


def write_parquet_atomic(frame: pd.DataFrame, path: str | Path, *, metadata: dict[str, str] | None = None) -> Path:
    """Write ``frame`` as Parquet (zstd), with string key-value ``metadata`` in the schema."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    table = pa.Table.from_pandas(frame, preserve_index=False)
    if metadata:
        merged = dict(table.schema.metadata or {})
        merged.update({k.encode(): v.encode() for k, v in metadata.items()})
        table = table.replace_schema_metadata(merged)
    tmp = _tmp(path)
    try:
        with naming(path):
            pq.write_table(table, tmp, compression="zstd")
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def write_csv_atomic(frame: pd.DataFrame, path: str | Path) -> Path:
    """Write ``frame`` as CSV (no index, 10 significant digits)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = _tmp(path)
    try:
        with naming(path):
            frame.to_csv(tmp, index=False, float_format="%.10g")
        os.replace(tmp, path)
    finally:
        if tmp.exists():
            tmp.unlink()
    return path


def write_result_tables(
    out_dir: str | Path,
    tables: dict[str, pd.DataFrame],
    *,
    summary: dict[str, Any] | None = None,
    metadata: dict[str, str] | None = None,
) -> dict[str, str]:
    """Write each table as ``<name>.parquet`` and ``<name>.csv`` (and ``summary.json``) in
    ``out_dir``; return ``{file name: path}``."""
    out = Path(out_dir)
    written: dict[str, str] = {}
    for name, frame in tables.items():
        written[f"{name}.parquet"] = str(write_parquet_atomic(frame, out / f"{name}.parquet", metadata=metadata))
        written[f"{name}.csv"] = str(write_csv_atomic(frame, out / f"{name}.csv"))
    if summary is not None:
        written["summary.json"] = str(write_json_atomic(out / "summary.json", summary))
    return written
