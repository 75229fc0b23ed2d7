"""The manifest: what a run is and every file it holds, with row counts and checksums."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pyarrow.parquet as pq

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json
from pqflow.storage.parquet import file_sha256

__all__ = ["build_manifest", "verify_run", "MANIFEST", "DERIVED_VIEWS"]

MANIFEST = "manifest.json"
# Derived views: pages rebuilt from the run's recorded files (``pqflow report``), which may be
# written or rewritten after the manifest. They are not part of the audit trail, so the
# manifest neither lists nor checks them; everything they show comes from files it does list.
DERIVED_VIEWS = frozenset({"validation/report.html"})


def _entry(root: Path, path: Path) -> dict[str, Any]:
    rel = path.relative_to(root).as_posix()
    entry: dict[str, Any] = {"path": rel, "bytes": path.stat().st_size, "sha256": file_sha256(path)}
    if path.suffix == ".parquet":
        entry["rows"] = pq.read_metadata(path).num_rows
    return entry


def build_manifest(root: str | Path, *, header: dict[str, Any]) -> dict[str, Any]:
    """Manifest of every file below ``root`` (the manifest itself and the derived views of
    :data:`DERIVED_VIEWS` excepted)."""
    root = Path(root)
    files = sorted(
        p for p in root.rglob("*")
        if p.is_file() and p.name != MANIFEST and not p.name.startswith(".")
        and p.relative_to(root).as_posix() not in DERIVED_VIEWS
    )
    return {**header, "files": [_entry(root, p) for p in files]}


def verify_run(root: str | Path) -> dict[str, Any]:
    """Check every file against the manifest; raise ``IntegrityError`` naming what differs.

    Derived views (:data:`DERIVED_VIEWS`) are ignored even if an older manifest lists them.
    """
    root = Path(root)
    mpath = root / MANIFEST
    if not mpath.exists():
        raise IntegrityError(f"{root}: no {MANIFEST}; not a finished pqflow run")
    manifest = read_json(mpath)
    problems = []
    for entry in manifest["files"]:
        if entry["path"] in DERIVED_VIEWS:
            continue
        path = root / entry["path"]
        if not path.exists():
            problems.append(f"{entry['path']}: missing")
        elif path.stat().st_size != entry["bytes"]:
            problems.append(f"{entry['path']}: size {path.stat().st_size} bytes, manifest says {entry['bytes']}")
        elif file_sha256(path) != entry["sha256"]:
            problems.append(f"{entry['path']}: content changed (sha256 differs from the manifest)")
    if problems:
        raise IntegrityError(f"{root}: files do not match {MANIFEST}:\n  " + "\n  ".join(problems))
    return manifest
