"""Run targets on any filesystem pyarrow supports: local paths, or URIs such as ``s3://``.

A local target (a path, or a ``file://`` URI) is built in a staging folder beside it and
published by one atomic rename (``pqflow.storage.rundir``).

Object stores have no atomic rename, so a run for a URI target is built and validated in a
local staging folder (``.pqflow/staging/NAME-HASH`` under the working directory, so that an
interrupted attempt can be resumed), then published in this order:

1. if an earlier run is replaced (``overwrite``), its ``manifest.json`` is deleted first: from
   that moment readers see no finished run there, never a mixture of two runs;
2. every file of the new run is uploaded (written under a temporary name, then moved);
3. ``manifest.json`` is uploaded last (temporary name, then moved).

Readers trust only files listed in a manifest, with sizes and sha256 checked
(``verify_target``): an upload that stops part-way leaves a prefix without a manifest, which
no reader accepts, and running again with ``--resume`` finishes the upload from the local
staging folder. Two writers on different machines cannot be kept apart by a local lock; give
each run its own prefix.
"""

from __future__ import annotations

import hashlib
import json
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.fs as pafs

from pqflow.errors import IntegrityError, RunDirectoryError
from pqflow.storage.parquet import file_sha256

__all__ = [
    "target_lock_path",
    "OutputTarget",
    "resolve_target",
    "remote_staging",
    "check_remote_target",
    "publish_to_filesystem",
    "verify_target",
]

_MANIFEST = "manifest.json"
_CHUNK = 8 << 20


@dataclass(frozen=True, kw_only=True)
class OutputTarget:
    """Where a run goes. ``filesystem`` is ``None`` for a local path (``path`` absolute)."""

    text: str
    filesystem: pafs.FileSystem | None
    path: str

    @property
    def is_local(self) -> bool:
        return self.filesystem is None

    @property
    def local(self) -> Path:
        if not self.is_local:
            raise ValueError(f"{self.text} is not a local path")
        return Path(self.path)

    @property
    def name(self) -> str:
        return self.path.rstrip("/").rpartition("/")[2] or "run"

    def join(self, rel: str) -> str:
        return f"{self.path.rstrip('/')}/{rel}"


def resolve_target(out: str | Path, *, filesystem: pafs.FileSystem | None = None) -> OutputTarget:
    """``out`` as a target: a local path, a ``file://`` URI, or any URI that
    ``pyarrow.fs.FileSystem.from_uri`` understands; or a path inside ``filesystem``."""
    if filesystem is not None:
        if isinstance(filesystem, pafs.LocalFileSystem):
            return OutputTarget(text=str(out), filesystem=None, path=str(Path(out).absolute()))
        return OutputTarget(text=str(out), filesystem=filesystem, path=str(out).rstrip("/"))
    text = str(out)
    if isinstance(out, Path) or "://" not in text:
        return OutputTarget(text=text, filesystem=None, path=str(Path(text).absolute()))
    try:
        fs, path = pafs.FileSystem.from_uri(text)
    except (pa.ArrowInvalid, pa.ArrowNotImplementedError, OSError, ValueError) as exc:
        raise RunDirectoryError(f"{text}: not a filesystem URI pyarrow can open ({exc})") from None
    if isinstance(fs, pafs.LocalFileSystem):
        return OutputTarget(text=text, filesystem=None, path=str(Path(path).absolute()))
    return OutputTarget(text=text, filesystem=fs, path=path.rstrip("/"))


def remote_staging(target: OutputTarget, root: str | Path | None = None) -> Path:
    """Local staging folder for a URI target (the same for every attempt at that target)."""
    digest = hashlib.sha256(target.text.encode("utf-8")).hexdigest()[:12]
    base = Path(root) if root is not None else Path(".pqflow") / "staging"
    return base.absolute() / f"{target.name}-{digest}"


def target_lock_path(target: OutputTarget) -> Path:
    """The lock file of a target: ``.NAME.lock`` beside a local one, beside the local staging
    folder of a URI."""
    from pqflow.storage.rundir import lock_path

    if target.is_local:
        return lock_path(target.local)
    staging = remote_staging(target)
    return staging.with_name(staging.name + ".lock")


def _info(fs: pafs.FileSystem, path: str) -> pafs.FileInfo:
    return fs.get_file_info(path)


def _listing(fs: pafs.FileSystem, path: str) -> list[pafs.FileInfo]:
    if _info(fs, path).type != pafs.FileType.Directory:
        return []
    return fs.get_file_info(pafs.FileSelector(path, recursive=True))


def check_remote_target(target: OutputTarget, overwrite: bool) -> None:
    """The rules of a local target: refuse a prefix that holds files unless ``overwrite`` and it
    holds a pqflow run (a manifest)."""
    fs = target.filesystem
    if fs is None:
        raise RuntimeError(f"{target!r} is not a remote target (no filesystem)")
    kind = _info(fs, target.path).type
    if kind == pafs.FileType.File:
        raise RunDirectoryError(f"{target.text} exists and is a file, not a folder")
    files = [i for i in _listing(fs, target.path) if i.type == pafs.FileType.File]
    if files and not overwrite:
        raise RunDirectoryError(
            f"{target.text} already holds files; choose another --out or pass --overwrite"
        )
    has_manifest = _info(fs, target.join(_MANIFEST)).type == pafs.FileType.File
    if files and overwrite and not has_manifest:
        raise RunDirectoryError(
            f"{target.text} holds files but no manifest.json, so it does not look like a pqflow "
            "run; pqflow will not overwrite it"
        )


def _upload(local: Path, fs: pafs.FileSystem, dest: str) -> None:
    parent, _, name = dest.rpartition("/")
    tmp = f"{parent}/.{name}.tmp-{uuid.uuid4().hex[:12]}"
    fs.create_dir(parent, recursive=True)
    with open(local, "rb") as src, fs.open_output_stream(tmp) as out:
        for chunk in iter(lambda: src.read(_CHUNK), b""):
            out.write(chunk)
    fs.move(tmp, dest)


def publish_to_filesystem(staging: str | Path, target: OutputTarget, *, overwrite: bool) -> str:
    """Upload a finished local staging folder (with its manifest) to ``target``, manifest last."""
    fs = target.filesystem
    if fs is None:
        raise ValueError("publish_to_filesystem is for targets that are not local paths")
    staging = Path(staging)
    with open(staging / _MANIFEST, encoding="utf-8") as fh:
        manifest = json.load(fh)
    check_remote_target(target, overwrite)
    if _info(fs, target.join(_MANIFEST)).type == pafs.FileType.File:
        fs.delete_file(target.join(_MANIFEST))  # the old run stops being a run first
        fs.delete_dir_contents(target.path, missing_dir_ok=True)
    for entry in manifest["files"]:
        _upload(staging / entry["path"], fs, target.join(entry["path"]))
    _upload(staging / _MANIFEST, fs, target.join(_MANIFEST))
    return target.text


def verify_target(target: OutputTarget) -> dict[str, Any]:
    """``verify_run`` for any target: every manifest entry present with its size and sha256;
    raises ``IntegrityError`` naming each file that differs."""
    if target.is_local:
        from pqflow.storage.manifest import verify_run

        return verify_run(target.local)
    fs = target.filesystem
    if fs is None:
        raise RuntimeError(f"{target!r} is neither local nor remote (no filesystem)")
    mpath = target.join(_MANIFEST)
    if _info(fs, mpath).type != pafs.FileType.File:
        raise IntegrityError(f"{target.text}: no {_MANIFEST}; not a finished pqflow run")
    with fs.open_input_stream(mpath) as fh:
        manifest = json.loads(fh.read().decode("utf-8"))
    problems = []
    for entry in manifest["files"]:
        info = _info(fs, target.join(entry["path"]))
        if info.type != pafs.FileType.File:
            problems.append(f"{entry['path']}: missing")
        elif info.size != entry["bytes"]:
            problems.append(f"{entry['path']}: size {info.size} bytes, manifest says {entry['bytes']}")
        elif file_sha256(target.join(entry["path"]), filesystem=fs) != entry["sha256"]:
            problems.append(f"{entry['path']}: content changed (sha256 differs from the manifest)")
    if problems:
        raise IntegrityError(f"{target.text}: files do not match {_MANIFEST}:\n  " + "\n  ".join(problems))
    return manifest
