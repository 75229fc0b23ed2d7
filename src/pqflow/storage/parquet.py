"""Scenario files: one Parquet part per batch, one row per (scenario, output time).

Layout inside a run directory::

    scenarios/<measure>/part-NNNNN.parquet

Rows are ordered by scenario, then time. Columns: ``scenario`` (int32, 0..N-1 across the
parts of a set), ``time`` (float64, years from the valuation date), then the model's float64
columns in a fixed order. The file's key-value metadata names the measure, the valuation
date, the units of each column and the compounding. Nothing time-dependent (no clock, no run
id) enters a part, so the same configuration and seed give the same bytes.
"""

from __future__ import annotations

import hashlib
import json
import os
import threading
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.fs as pafs
import pyarrow.parquet as pq

from pqflow.storage.names import KEY_COLUMNS
from pqflow.storage.oserror import naming

__all__ = [
    "PART_GLOB",
    "KEY_COLUMNS",
    "WRITE_OPTIONS",
    "parquet_write_kwargs",
    "part_name",
    "batch_table",
    "write_part",
    "write_part_hashed",
    "read_part",
    "part_paths",
    "iter_parts",
    "file_sha256",
]

PART_GLOB = "part-*.parquet"

#: How parts are encoded (chosen by ``benchmarks/run.py``, see its Parquet table): zstd at level 1
#: over byte-stream-split doubles compresses simulated floats best at little cost; dictionary
#: encoding and statistics only for the two key columns (a dictionary of random doubles is
#: built and then thrown away, which made writing five times slower). Changing any of these
#: changes the bytes of every part.
WRITE_OPTIONS = {
    "compression": "zstd",
    "compression_level": 1,
    "row_group_size": 262_144,
}


def part_name(batch_index: int) -> str:
    return f"part-{batch_index:05d}.parquet"


def batch_table(
    columns: dict[str, np.ndarray],
    times: np.ndarray,
    *,
    first_scenario: int,
    metadata: dict[str, str],
) -> pa.Table:
    """Long-format table of one batch. ``columns`` values have shape ``(n_paths, n_times)``."""
    first = next(iter(columns.values()))
    n_paths, n_times = first.shape
    if n_times != times.size:
        raise ValueError("columns and times disagree on the number of output times")
    scenario = np.repeat(np.arange(first_scenario, first_scenario + n_paths, dtype=np.int32), n_times)
    arrays = {"scenario": scenario, "time": np.tile(times, n_paths)}
    for name, values in columns.items():
        if values.shape != (n_paths, n_times):
            raise ValueError(f"column {name} has shape {values.shape}, expected {(n_paths, n_times)}")
        arrays[name] = np.ascontiguousarray(values, dtype=np.float64).reshape(-1)
    table = pa.table(arrays)
    return table.replace_schema_metadata({k.encode(): v.encode() for k, v in metadata.items()})


def parquet_write_kwargs(table: pa.Table | pa.Schema) -> dict:
    """Keyword arguments of ``pyarrow.parquet.write_table`` for a part with this schema."""
    schema = table if isinstance(table, pa.Schema) else table.schema
    floats = [f.name for f in schema if pa.types.is_float64(f.type) and f.name not in KEY_COLUMNS]
    keys = [c for c in KEY_COLUMNS if c in schema.names]
    return {
        **WRITE_OPTIONS,
        "use_dictionary": keys,
        "write_statistics": keys,
        "use_byte_stream_split": floats,
    }


def write_part(table: pa.Table, path: str | Path, *, filesystem: pafs.FileSystem | None = None) -> Path:
    """Write a part under a temporary name, then rename it into place: a crash never leaves a
    truncated file under a final name.

    ``filesystem``: any ``pyarrow.fs.FileSystem`` (``path`` is then a path inside it); by default
    the local disk. On object stores the final "rename" is a copy (no atomic rename exists
    there): a run's readers trust only files listed in its manifest, which is written last.
    """
    return write_part_hashed(table, path, filesystem=filesystem)[0]


def write_part_hashed(
    table: pa.Table, path: str | Path, *, filesystem: pafs.FileSystem | None = None
) -> tuple[Path, str]:
    """As :func:`write_part`, and the sha256 of the file's bytes, taken from the bytes as they
    are written: the part is encoded into memory (one part, tens of MB), hashed there and
    written out in one piece, so the file is never read back. The bytes are those
    ``pyarrow.parquet.write_table`` writes to a path with the same options."""
    kwargs = parquet_write_kwargs(table)
    sink = pa.BufferOutputStream()
    pq.write_table(table, sink, **kwargs)
    data = sink.getvalue()
    digest = hashlib.sha256(memoryview(data)).hexdigest()
    if filesystem is None:
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}-{threading.get_ident()}")
        try:
            with naming(path), open(tmp, "wb") as fh:
                fh.write(memoryview(data))
            os.replace(tmp, path)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
        return path, digest
    target = str(path)
    parent, _, name = target.rpartition("/")
    tmp_key = f"{parent}/.{name}.tmp-{os.getpid()}-{threading.get_ident()}"
    filesystem.create_dir(parent, recursive=True)
    with filesystem.open_output_stream(tmp_key) as out:
        out.write(data)
    filesystem.move(tmp_key, target)
    return Path(target), digest


def read_part(path: str | Path, columns: Sequence[str] | None = None) -> pa.Table:
    return pq.read_table(path, columns=list(columns) if columns is not None else None)


def part_paths(set_dir: str | Path) -> list[Path]:
    """The parts of one scenario set, in batch order."""
    return sorted(Path(set_dir).glob(PART_GLOB))


def iter_parts(set_dir: str | Path, columns: Sequence[str] | None = None) -> Iterator[pa.Table]:
    """Read a set part by part (memory bounded by one part)."""
    for path in part_paths(set_dir):
        yield read_part(path, columns)


def part_metadata(path: str | Path) -> dict[str, str]:
    meta = pq.read_schema(path).metadata or {}
    return {k.decode(): v.decode() for k, v in meta.items()}


def units_metadata(units: dict[str, str]) -> str:
    return json.dumps(units, sort_keys=True)


def file_sha256(path: str | Path, *, filesystem: pafs.FileSystem | None = None) -> str:
    """sha256 of a file's bytes (local, or a path inside ``filesystem``), read in 1 MiB chunks."""
    h = hashlib.sha256()
    if filesystem is None:
        with open(path, "rb") as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
    else:
        with filesystem.open_input_stream(str(path)) as fh:
            for chunk in iter(lambda: fh.read(1 << 20), b""):
                h.update(chunk)
    return h.hexdigest()
