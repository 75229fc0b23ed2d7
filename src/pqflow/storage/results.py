"""Result tables (Parquet and CSV) written atomically: temporary name in the same folder, then
``os.replace``, so a reader never sees a half-written file under its final name."""

from __future__ import annotations

import os
import shutil
import uuid
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from pqflow.storage.jsonio import write_json_atomic
from pqflow.storage.oserror import naming

__all__ = [
    "write_parquet_atomic",
    "write_csv_atomic",
    "write_result_tables",
    "replace_directory",
    "write_table_folder",
    "discard_folder_scratch",
]


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


def replace_directory(fresh: str | Path, target: str | Path) -> Path:
    """Put the finished folder ``fresh`` in place of ``target`` (same parent) by renames: the
    old folder is moved aside, the new one moved in, the old one removed. A failure before the
    second rename leaves ``target`` as it was; ``fresh`` is never half-copied into it."""
    fresh, target = Path(fresh), Path(target)
    old = None
    if target.exists():
        old = target.with_name(f".{target.name}.old-{uuid.uuid4().hex[:12]}")
        os.replace(target, old)
    try:
        os.replace(fresh, target)
    except OSError:
        if old is not None:
            os.replace(old, target)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    return target


def _scratch_glob(name: str) -> str:
    return f".{name}.new-*"


def discard_folder_scratch(parent: str | Path, name: str) -> None:
    """Remove the scratch folders of :func:`write_table_folder` left by a process killed mid-write."""
    for stale in Path(parent).glob(_scratch_glob(name)):
        shutil.rmtree(stale, ignore_errors=True)


def write_table_folder(
    parent: str | Path,
    name: str,
    tables: dict[str, pd.DataFrame],
    summary: dict[str, Any],
    *,
    carry_over: tuple[str, ...] = (),
) -> Path:
    """Put a fresh folder ``parent/name`` in place: one CSV per table and ``summary.json``,
    written to a sibling scratch folder first, which then replaces the old one
    (:func:`replace_directory`), so a failure leaves the earlier folder whole. Files named in
    ``carry_over`` that the old folder holds are copied into the new one."""
    parent = Path(parent)
    discard_folder_scratch(parent, name)
    out = parent / name
    fresh = parent / _scratch_glob(name).replace("*", uuid.uuid4().hex[:12])
    try:
        fresh.mkdir(parents=True)
        for table, frame in tables.items():
            write_csv_atomic(frame, fresh / f"{table}.csv")
        write_json_atomic(fresh / "summary.json", summary)
        for kept in carry_over:
            if (out / kept).is_file():
                shutil.copy2(out / kept, fresh / kept)
        replace_directory(fresh, out)
    finally:
        if fresh.exists():
            shutil.rmtree(fresh, ignore_errors=True)
    return out
