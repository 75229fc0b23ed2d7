"""Storage: every byte pqflow writes or reads goes through here.

The names below are loaded on first use, so that ``pqflow.storage.names`` (the column names and
metadata keys, standard library only) can be imported by any layer without pyarrow.
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "OutputTarget",
    "batch_table",
    "build_manifest",
    "discard_staging",
    "export_slice",
    "file_sha256",
    "iter_parts",
    "part_name",
    "part_paths",
    "prepare_staging",
    "publish_staging",
    "read_json",
    "read_part",
    "resolve_target",
    "run_lock",
    "verify_run",
    "verify_target",
    "write_json_atomic",
    "write_part",
]

_WHERE = {
    "export_slice": "export",
    "OutputTarget": "filesystem", "resolve_target": "filesystem", "verify_target": "filesystem",
    "read_json": "jsonio", "write_json_atomic": "jsonio",
    "build_manifest": "manifest", "verify_run": "manifest",
    "batch_table": "parquet", "file_sha256": "parquet", "iter_parts": "parquet", "part_name": "parquet",
    "part_paths": "parquet", "read_part": "parquet", "write_part": "parquet",
    "discard_staging": "rundir", "prepare_staging": "rundir", "publish_staging": "rundir", "run_lock": "rundir",
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        import importlib

        return getattr(importlib.import_module(f"pqflow.storage.{_WHERE[name]}"), name)
    raise AttributeError(f"module 'pqflow.storage' has no attribute {name!r}")
