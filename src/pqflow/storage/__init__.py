"""Storage: every byte pqflow writes or reads goes through here."""

from __future__ import annotations

from pqflow.storage.export import export_slice
from pqflow.storage.filesystem import OutputTarget, resolve_target, verify_target
from pqflow.storage.jsonio import read_json, write_json_atomic
from pqflow.storage.manifest import build_manifest, verify_run
from pqflow.storage.parquet import (
    batch_table,
    file_sha256,
    iter_parts,
    part_name,
    part_paths,
    read_part,
    write_part,
)
from pqflow.storage.rundir import discard_staging, prepare_staging, publish_staging, run_lock

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
