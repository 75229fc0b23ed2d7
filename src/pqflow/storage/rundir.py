"""Run directories: built in a staging folder beside the target, published by rename.

Layout beside a target ``runs/q3``::

    runs/.q3.lock        held while a run writes to runs/q3 (pid, host, time)
    runs/.q3.staging/    the run being built; same name for every attempt, so an interrupted
                         attempt can be resumed
        .progress.jsonl  one header line, then one line per finished part (path, rows, sha256),
                         appended only after the part has been renamed into place
    runs/q3/             the published run (the staging folder renamed, progress file removed)

A failed run (an exception) deletes its staging folder and leaves any earlier run untouched; a
run that succeeds with ``overwrite`` swaps the old directory out and the new one in, then deletes
the old one. An interrupted run (killed, Ctrl-C) leaves the staging folder: ``resume=True`` keeps
each recorded part whose sha256 still matches its record and discards the rest; a run without
``resume`` starts afresh. Two runs into one target at once cannot happen: the lock file is
created with ``O_CREAT | O_EXCL``; a lock whose process is gone (same host) is taken over.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import shutil
import socket
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pqflow.errors import RunDirectoryError
from pqflow.storage.parquet import file_sha256
from pqflow.storage.results import replace_directory

__all__ = [
    "PROGRESS",
    "StagingState",
    "staging_path",
    "lock_path",
    "acquire_lock",
    "release_lock",
    "run_lock",
    "check_target",
    "prepare_staging",
    "record_part",
    "publish_staging",
    "discard_staging",
    "fingerprint_of",
]

PROGRESS = ".progress.jsonl"
_MANIFEST = "manifest.json"


def staging_path(out: str | Path) -> Path:
    """The staging folder of a target: ``.NAME.staging`` beside it (the same for every attempt)."""
    out = Path(out).absolute()
    return out.parent / f".{out.name}.staging"


def lock_path(out: str | Path) -> Path:
    """The lock file of a target: ``.NAME.lock`` beside it."""
    out = Path(out).absolute()
    return out.parent / f".{out.name}.lock"


# ----------------------------------------------------------------------------------- locking


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, owned by someone else
        return True
    return True


def _read_lock(path: Path) -> dict[str, Any] | None:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None
    except (OSError, ValueError):
        return {}


#: Locks this process holds, by absolute path, with how many times each was taken.
_HELD: dict[str, int] = {}


def acquire_lock(lock: str | Path, *, target: str | Path | None = None, reentrant: bool = False) -> Path:
    """Create ``lock`` exclusively, holding this process's pid, host and the time.

    Raises ``RunDirectoryError`` naming the holder when another live process holds it. A lock
    left by a process that no longer exists on this host is taken over; a lock from another
    host cannot be checked and must be removed by hand. A lock taken with ``reentrant`` (the
    command line locks before any work) may be taken again by this process, e.g. by the flow
    it runs; it is counted and released by the matching number of ``release_lock``.
    """
    lock = Path(lock)
    key = str(lock.absolute())
    if key in _HELD:  # this process holds it already (the command line locks before any work)
        _HELD[key] += 1
        return lock
    lock.parent.mkdir(parents=True, exist_ok=True)
    what = target if target is not None else lock
    body = {
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "created_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
    }
    for _ in range(3):
        try:
            fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
        except FileExistsError:
            holder = _read_lock(lock)
            if holder is None:
                continue  # released meanwhile: try again
            pid, host = holder.get("pid"), holder.get("host")
            if isinstance(pid, int) and host == socket.gethostname() and not _pid_alive(pid):
                lock.unlink(missing_ok=True)  # stale: its process is gone
                continue
            since = holder.get("created_utc", "an unknown time")
            raise RunDirectoryError(
                f"{what} is being written by another pqflow run (pid {pid} on host {host}, "
                f"since {since}); wait for it to finish. If that run is no longer running, "
                f"delete {lock}"
            ) from None
        try:
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                json.dump(body, fh)
                fh.write("\n")
        except BaseException:  # e.g. disk full: a lock that could not be written is not left behind
            lock.unlink(missing_ok=True)
            raise
        if reentrant:
            _HELD[key] = 1
        return lock
    raise RunDirectoryError(f"could not take the lock {lock}; try again")


def release_lock(lock: str | Path) -> None:
    """Remove ``lock`` if this process holds it."""
    lock = Path(lock)
    key = str(lock.absolute())
    if _HELD.get(key, 0) > 1:  # an inner holder of a lock this process took twice
        _HELD[key] -= 1
        return
    _HELD.pop(key, None)
    holder = _read_lock(lock)
    if holder and holder.get("pid") == os.getpid() and holder.get("host") == socket.gethostname():
        lock.unlink(missing_ok=True)


@contextmanager
def run_lock(out: str | Path) -> Iterator[Path]:
    """Hold the lock of target ``out`` for the duration of the block."""
    lock = acquire_lock(lock_path(out), target=Path(out).absolute())
    try:
        yield lock
    finally:
        release_lock(lock)


# ------------------------------------------------------------------------------ the target


def check_target(out: str | Path, overwrite: bool) -> None:
    """Refuse a target that holds files, unless ``overwrite`` and it is a finished pqflow run."""
    out = Path(out).absolute()
    if out.exists():
        if not out.is_dir():
            raise RunDirectoryError(f"{out} exists and is not a directory")
        if not overwrite and any(out.iterdir()):
            raise RunDirectoryError(
                f"{out} already holds files; choose another --out or pass --overwrite "
                "(the earlier run is replaced only once the new one has succeeded)"
            )
        if overwrite and any(out.iterdir()) and not (out / _MANIFEST).exists():
            raise RunDirectoryError(
                f"{out} is not empty and holds no manifest.json, so it does not look like a pqflow "
                "run; pqflow will not overwrite it"
            )


_check_target = check_target  # the name the command line has used


# ----------------------------------------------------------------------------- staging


@dataclass(frozen=True, kw_only=True)
class StagingState:
    """What ``prepare_staging`` found and kept.

    path: the staging folder; run_id: the attempt's id (kept across resumed attempts);
    kept: records (``path``, ``measure``, ``batch``, ``rows``, ``sha256``) of finished parts whose
    bytes still match; discarded: parts that were found damaged, missing or unrecorded.
    """

    path: Path
    run_id: str
    resumed: bool
    kept: tuple[dict[str, Any], ...]
    discarded: tuple[str, ...]


def _read_progress(staging: Path) -> tuple[dict[str, Any] | None, list[dict[str, Any]]]:
    path = staging / PROGRESS
    if not path.exists():
        return None, []
    header, parts = None, []
    with open(path, encoding="utf-8") as fh:
        for line in fh:
            try:
                rec = json.loads(line)
            except ValueError:  # a line cut short by the interruption
                continue
            if rec.get("kind") == "header" and header is None:
                header = rec
            elif rec.get("kind") == "part":
                parts.append(rec)
    return header, parts


def _append_progress(staging: Path, record: dict[str, Any]) -> None:
    line = json.dumps(record, sort_keys=True) + "\n"
    fd = os.open(staging / PROGRESS, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
    try:
        os.write(fd, line.encode("utf-8"))
        os.fsync(fd)
    finally:
        os.close(fd)


def _is_part(path: Path) -> bool:
    return path.suffix == ".parquet" and not path.name.startswith(".")


def _fresh(staging: Path, fingerprint: str, run_id: str | None) -> StagingState:
    shutil.rmtree(staging, ignore_errors=True)
    staging.mkdir(parents=True)
    rid = run_id or uuid.uuid4().hex
    _append_progress(
        staging,
        {
            "kind": "header",
            "fingerprint": fingerprint,
            "run_id": rid,
            "started_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        },
    )
    return StagingState(path=staging, run_id=rid, resumed=False, kept=(), discarded=())


def prepare_staging(
    out: str | Path,
    *,
    overwrite: bool,
    resume: bool = False,
    fingerprint: str = "",
    run_id: str | None = None,
    staging: str | Path | None = None,
) -> StagingState:
    """Check the target and get its staging folder ready. Hold the target's lock first.

    ``fingerprint`` names what the parts depend on (configuration, versions): a resumed attempt
    with another fingerprint is refused, since its parts would belong to another run. With
    ``resume`` every recorded part is checked against its sha256; damaged, missing and
    unrecorded parts are deleted (and are regenerated by the caller), as are temporary files
    and the outputs of later steps (validation, manifest), which are cheap to recompute.
    ``staging`` overrides the folder's location (used for targets that are not local paths).
    """
    if staging is None:
        out_path = Path(out).absolute()
        check_target(out_path, overwrite)
        folder = staging_path(out_path)
    else:
        folder = Path(staging).absolute()
    folder.parent.mkdir(parents=True, exist_ok=True)
    header, records = _read_progress(folder) if folder.is_dir() else (None, [])
    if not resume or header is None:
        return _fresh(folder, fingerprint, run_id)
    if header.get("fingerprint") != fingerprint:
        raise RunDirectoryError(
            f"cannot resume: the interrupted run in {folder} was made from another configuration "
            "or another version of pqflow, numpy or pyarrow, so its parts would not match; run "
            "again without --resume to start afresh"
        )
    kept: dict[str, dict[str, Any]] = {}
    discarded: list[str] = []
    for rec in records:
        path = folder / rec["path"]
        ok = path.is_file() and path.stat().st_size > 0 and file_sha256(path) == rec["sha256"]
        if ok:
            kept[rec["path"]] = rec
        else:
            discarded.append(rec["path"])
            path.unlink(missing_ok=True)
    for path in sorted(p for p in folder.rglob("*") if p.is_file()):
        rel = path.relative_to(folder).as_posix()
        if rel == PROGRESS or rel == "calibration.json" or rel in kept:
            continue
        if _is_part(path):
            discarded.append(rel)
        path.unlink()
    # Rewrite the progress file with what was kept, so it never lists a deleted part.
    tmp = folder / f"{PROGRESS}.tmp"
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write(json.dumps(header, sort_keys=True) + "\n")
        for rec in kept.values():
            fh.write(json.dumps(rec, sort_keys=True) + "\n")
    os.replace(tmp, folder / PROGRESS)
    return StagingState(
        path=folder,
        run_id=str(header.get("run_id") or run_id or uuid.uuid4().hex),
        resumed=True,
        kept=tuple(kept.values()),
        discarded=tuple(sorted(set(discarded))),
    )


def record_part(staging: str | Path, record: dict[str, Any]) -> None:
    """Append a finished part (already renamed into place) to the progress file, durably."""
    need = {"path", "measure", "batch", "rows", "sha256"}
    if not need <= record.keys():
        raise ValueError(f"a part record needs {sorted(need)}")
    _append_progress(Path(staging), {"kind": "part", **{k: record[k] for k in sorted(need)}})


def publish_staging(staging: str | Path, out: str | Path, *, overwrite: bool) -> Path:
    """Move the finished staging folder to ``out`` (its progress file removed)."""
    staging, out = Path(staging), Path(out).absolute()
    check_target(out, overwrite)
    (staging / PROGRESS).unlink(missing_ok=True)
    return replace_directory(staging, out)


def discard_staging(staging: str | Path) -> None:
    shutil.rmtree(staging, ignore_errors=True)


def fingerprint_of(parts: dict[str, Any]) -> str:
    """sha256 of a JSON-able description of what a run's bytes depend on."""
    canon = json.dumps(parts, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(canon.encode("utf-8")).hexdigest()

