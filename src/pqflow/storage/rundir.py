"""Run directories are built in a staging folder beside the target and published by rename.

A failed run deletes its staging folder and leaves any earlier run untouched; a run that
succeeds with ``overwrite`` swaps the old directory out and the new one in, then deletes the
old one.
"""

from __future__ import annotations

import os
import shutil
import uuid
from pathlib import Path

from pqflow.errors import RunDirectoryError

__all__ = ["prepare_staging", "publish_staging", "discard_staging"]


def _check_target(out: Path, overwrite: bool) -> None:
    if out.exists():
        if not out.is_dir():
            raise RunDirectoryError(f"{out} exists and is not a directory")
        if not overwrite and any(out.iterdir()):
            raise RunDirectoryError(
                f"{out} already holds files; choose another --out or pass --overwrite "
                "(the earlier run is replaced only once the new one has succeeded)"
            )
        if overwrite and any(out.iterdir()) and not (out / "manifest.json").exists():
            raise RunDirectoryError(
                f"{out} is not empty and holds no manifest.json, so it does not look like a pqflow "
                "run; pqflow will not overwrite it"
            )


def prepare_staging(out: str | Path, *, overwrite: bool) -> Path:
    """Check the target and create an empty staging folder beside it."""
    out = Path(out).absolute()
    _check_target(out, overwrite)
    out.parent.mkdir(parents=True, exist_ok=True)
    staging = out.parent / f".{out.name}.staging-{uuid.uuid4().hex[:12]}"
    staging.mkdir()
    return staging


def publish_staging(staging: str | Path, out: str | Path, *, overwrite: bool) -> Path:
    """Move the finished staging folder to ``out``."""
    staging, out = Path(staging), Path(out).absolute()
    _check_target(out, overwrite)
    old = None
    if out.exists():
        old = out.parent / f".{out.name}.old-{uuid.uuid4().hex[:12]}"
        os.replace(out, old)
    try:
        os.replace(staging, out)
    except OSError:
        if old is not None:
            os.replace(old, out)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    return out


def discard_staging(staging: str | Path) -> None:
    shutil.rmtree(staging, ignore_errors=True)
