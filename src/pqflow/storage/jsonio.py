"""JSON files written atomically (temporary name, then rename)."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from pqflow.errors import IntegrityError

__all__ = ["write_json_atomic", "write_text_atomic", "read_json", "read_json_checked"]


def write_json_atomic(path: str | Path, obj: Any) -> Path:
    """Write ``obj`` as indented JSON; readers never see a half-written file, and a failed write
    leaves neither a temporary file nor a changed ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            json.dump(obj, fh, indent=2, sort_keys=False, allow_nan=False)
            fh.write("\n")
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:  # disk full, interrupted: no temporary file is left behind
        tmp.unlink(missing_ok=True)
        raise
    return path


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` through a temporary name in the same folder, then
    rename: readers never see a half-written page, and a failed write leaves neither a
    temporary file nor a changed ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def read_json(path: str | Path) -> Any:
    with open(path, encoding="utf-8") as fh:
        return json.load(fh)


def read_json_checked(path: str | Path) -> Any:
    """A run's JSON file, read: a missing, damaged or truncated file raises ``IntegrityError``
    naming it (the run files' readers in storage/ share this)."""
    try:
        return read_json(path)
    except FileNotFoundError:
        raise IntegrityError(f"{path}: missing") from None
    except (ValueError, UnicodeDecodeError) as exc:
        raise IntegrityError(f"{path}: not valid JSON, truncated or damaged ({exc})") from None
