"""The manifest: what a run is and every file it holds, with row counts and checksums."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from types import MappingProxyType
from typing import Any

import pyarrow.parquet as pq

from pqflow.errors import IntegrityError
from pqflow.storage.jsonio import read_json_checked
from pqflow.storage.parquet import file_sha256

__all__ = [
    "build_manifest", "verify_run", "load_manifest", "listed_parts", "MANIFEST", "DERIVED_VIEWS",
    "ManifestRecord", "FileEntry", "manifest_record", "read_manifest",
]

MANIFEST = "manifest.json"
# Derived views: pages rebuilt from the run's recorded files (``pqflow report``), which may be
# written or rewritten after the manifest. They are not part of the audit trail, so the
# manifest neither lists nor checks them; everything they show comes from files it does list.
DERIVED_VIEWS = frozenset({"validation/report.html"})
# ``pqflow value`` writes after the run's manifest; its outputs are covered by a manifest of
# their own in the valuation folder (when present, ``verify_run`` checks it the same way; its
# paths are relative to the run, or to the valuation folder).
VALUATION_DIR = "valuation/"


def _entry(root: Path, path: Path, known: Mapping[str, tuple[str, int]]) -> dict[str, Any]:
    rel = path.relative_to(root).as_posix()
    size = path.stat().st_size
    digest, written = known.get(rel, ("", -1))
    sha = digest if digest and written == size else file_sha256(path)
    entry: dict[str, Any] = {"path": rel, "bytes": size, "sha256": sha}
    if path.suffix == ".parquet":
        entry["rows"] = pq.read_metadata(path).num_rows
    return entry


def build_manifest(
    root: str | Path, *, header: dict[str, Any], known: Mapping[str, tuple[str, int]] | None = None
) -> dict[str, Any]:
    """Manifest of every file below ``root`` (the manifest itself and the derived views of
    :data:`DERIVED_VIEWS` excepted).

    ``known``: path (relative to ``root``) -> ``(sha256, bytes)`` its writer took from the bytes
    as it wrote them (:func:`pqflow.storage.parquet.write_part_hashed`); such a file is not read
    again when its size is still the size written. Every other file is hashed here."""
    root = Path(root)
    files = sorted(
        p for p in root.rglob("*")
        if p.is_file() and p.name != MANIFEST and not p.name.startswith(".")
        and p.relative_to(root).as_posix() not in DERIVED_VIEWS
    )
    return {**header, "files": [_entry(root, p, known or {}) for p in files]}


def _entry_problem(root: Path, index: int, entry: Any) -> str | None:
    """Why a manifest entry cannot be trusted as written, or None: every entry is an object with
    a relative ``path`` that stays inside the run (no absolute path, no ``..``, no link out),
    an integer ``bytes`` and a 64-digit ``sha256``."""
    if not isinstance(entry, dict):
        return f"files[{index}] is not an object"
    rel = entry.get("path")
    if not isinstance(rel, str) or not rel:
        return f"files[{index}].path is missing or not text"
    pure = PurePosixPath(rel)
    if pure.is_absolute() or "\\" in rel or ":" in pure.parts[0] or ".." in pure.parts:
        return (f"files[{index}].path {rel!r} is not a relative path inside the run "
                "(absolute paths and '..' are refused)")
    resolved = (root / rel).resolve()
    if resolved != root.resolve() and root.resolve() not in resolved.parents:
        return f"files[{index}].path {rel!r} leads outside the run (a link?)"
    if not isinstance(entry.get("bytes"), int) or isinstance(entry.get("bytes"), bool) or entry["bytes"] < 0:
        return f"files[{index}].bytes ({rel}) is not a byte count"
    sha = entry.get("sha256")
    if not isinstance(sha, str) or len(sha) != 64 or any(c not in "0123456789abcdef" for c in sha):
        return f"files[{index}].sha256 ({rel}) is not a sha256 digest"
    return None


def load_manifest(root: str | Path, name: str = MANIFEST) -> dict[str, Any]:
    """Read ``root/name`` and check its structure (not the files): a missing, truncated or
    malformed manifest, or an entry whose path leaves the run, raises ``IntegrityError``."""
    root = Path(root)
    mpath = root / name
    if not mpath.is_file():
        raise IntegrityError(f"{root}: no {name}; not a finished pqflow run")
    manifest = read_json_checked(mpath)
    if not isinstance(manifest, dict) or not isinstance(manifest.get("files"), list):
        raise IntegrityError(f"{mpath}: key 'files' (the list of the run's files) is missing or not a list")
    for i, entry in enumerate(manifest["files"]):
        if (problem := _entry_problem(root, i, entry)) is not None:
            raise IntegrityError(f"{mpath}: {problem}")
    return manifest


def listed_parts(root: str | Path, measure: str) -> list[Path]:
    """The parts of one scenario set that the run's manifest lists, in batch order: readers of
    a finished run read exactly these (a part copied in beside them is never read)."""
    root = Path(root)
    prefix = f"scenarios/{measure}/"
    manifest = load_manifest(root)
    return sorted(
        root / e["path"] for e in manifest["files"]
        if e["path"].startswith(prefix) and e["path"].endswith(".parquet")
    )


def _file_problems(root: Path, entries: list[dict[str, Any]]) -> list[str]:
    problems = []
    for entry in entries:
        if entry["path"] in DERIVED_VIEWS:
            continue
        path = root / entry["path"]
        if not path.exists():
            problems.append(f"{entry['path']}: missing")
        elif not path.is_file():
            problems.append(f"{entry['path']}: not a regular file")
        elif path.stat().st_size != entry["bytes"]:
            problems.append(f"{entry['path']}: size {path.stat().st_size} bytes, manifest says {entry['bytes']}")
        elif file_sha256(path) != entry["sha256"]:
            problems.append(f"{entry['path']}: content changed (sha256 differs from the manifest)")
    return problems


def _unlisted(root: Path, folder: Path, listed: set[str], skip: set[str]) -> list[str]:
    found = []
    for path in sorted(folder.rglob("*")):
        rel = path.relative_to(root).as_posix()
        if path.is_dir() or rel in listed or rel in skip or rel in DERIVED_VIEWS:
            continue
        if any(rel == s.rstrip("/") or rel.startswith(s) for s in skip if s.endswith("/")):
            continue
        found.append(f"{rel}: not listed in the manifest")
    return found


def verify_run(root: str | Path) -> dict[str, Any]:
    """Check every file against the manifest; raise ``IntegrityError`` naming what differs.

    A file the manifest does not list is reported too (readers would otherwise never know it
    is there); ``valuation/`` has a manifest of its own, checked by
    :func:`pqflow.storage.valuation_files.verify_valuation`.
    Derived views (:data:`DERIVED_VIEWS`) are ignored even if an older manifest lists them.
    """
    root = Path(root)
    manifest = load_manifest(root)
    listed = {e["path"] for e in manifest["files"]}
    problems = _file_problems(root, manifest["files"])
    problems += _unlisted(root, root, listed, {MANIFEST, VALUATION_DIR})
    if len(problems) == 1:
        raise IntegrityError(f"{root}: {problems[0]} ({MANIFEST})")
    if problems:
        raise IntegrityError(f"{root}: files do not match {MANIFEST}:\n  " + "\n  ".join(problems))
    return manifest


# -- the manifest as a typed record ------------------------------------------------------------
# The header keys are spelled here only; readers outside storage/ use :class:`ManifestRecord`.
RUN_ID = "run_id"
RUN_NAME = "run_name"
CREATED_UTC = "created_utc"
PQFLOW_VERSION = "pqflow_version"
VALUATION_DATE = "valuation_date"
CONFIG_SHA256 = "config_sha256"
SEEDS = "seeds"
ROOT_SEED = "root_seed"
SEED_SCHEME = "scheme"
SCENARIOS = "scenarios"
OUTPUT_TIMES = "output_times"
HORIZON_YEARS = "horizon_years"
ANTITHETIC = "antithetic"
SIGNOFF = "signoff"
FILES = "files"
PYTHON = "python"
NUMPY = "numpy"
PYARROW = "pyarrow"
MEASURE_STREAMS = "measure_streams"
BATCHES = "batches"
CAUTION = "caution"
REVALIDATED_UTC = "revalidated_utc"


@dataclass(frozen=True)
class FileEntry:
    """One entry of the manifest's file list."""

    path: str
    bytes: int
    sha256: str
    rows: int | None = None  # Parquet files


@dataclass(frozen=True)
class ManifestRecord:
    """``manifest.json`` of a run: the header typed (``None`` where an older run lacks a field),
    the file entries as written, the whole document as :attr:`document`."""

    files: tuple[Mapping[str, Any], ...]
    run_id: str | None = None
    run_name: str | None = None
    created_utc: str | None = None
    pqflow_version: str | None = None
    python: str | None = None
    numpy: str | None = None
    pyarrow: str | None = None
    valuation_date: str | None = None
    config_sha256: str | None = None
    #: ``{"root_seed", "scheme", "measure_streams", "batches"}`` as written
    seeds: dict[str, Any] | None = None
    #: per set (measure name -> value), as written
    scenarios: dict[str, Any] | None = None
    output_times: dict[str, Any] | None = None
    horizon_years: dict[str, Any] | None = None
    antithetic: bool | None = None
    #: names for the report's sign-off page (``[signoff]`` of the configuration)
    signoff: dict[str, Any] | None = None
    document: Mapping[str, Any] = field(default_factory=lambda: MappingProxyType({}), repr=False)

    @property
    def root_seed(self) -> Any:
        """The run's root seed, ``None`` when the manifest does not record it."""
        return (self.seeds or {}).get(ROOT_SEED)

    @property
    def seed_scheme(self) -> Any:
        return (self.seeds or {}).get(SEED_SCHEME)

    def header(self) -> dict[str, Any]:
        """Every header entry (all but the file list), in file order: what a rewritten manifest
        keeps (``pqflow validate``)."""
        return {k: v for k, v in self.document.items() if k != FILES}

    def file_entries(self) -> dict[str, FileEntry]:
        """The listed files by path."""
        return {e["path"]: FileEntry(path=e["path"], bytes=e["bytes"], sha256=e["sha256"], rows=e.get("rows"))
                for e in self.files}

    def field_or(self, name: str, default: Any) -> Any:
        """A header entry as written, ``default`` when absent (the report shows a dash)."""
        return self.document.get(name, default)

    @classmethod
    def from_json(cls, data: Any, *, where: str = MANIFEST) -> ManifestRecord:
        if not isinstance(data, Mapping):
            raise IntegrityError(f"{where}: not a JSON object")
        if not isinstance(data.get(FILES), list):
            raise IntegrityError(f"{where}: key {FILES!r} (the list of the run's files) is missing or not a list")
        g = data.get
        return cls(
            files=tuple(data[FILES]), run_id=g(RUN_ID), run_name=g(RUN_NAME), created_utc=g(CREATED_UTC),
            pqflow_version=g(PQFLOW_VERSION), python=g(PYTHON), numpy=g(NUMPY), pyarrow=g(PYARROW),
            valuation_date=g(VALUATION_DATE), config_sha256=g(CONFIG_SHA256), seeds=g(SEEDS),
            scenarios=g(SCENARIOS), output_times=g(OUTPUT_TIMES), horizon_years=g(HORIZON_YEARS),
            antithetic=g(ANTITHETIC), signoff=g(SIGNOFF), document=MappingProxyType(dict(data)),
        )


def manifest_record(manifest: Mapping[str, Any], *, where: str = MANIFEST) -> ManifestRecord:
    """The record of a manifest already read (:func:`load_manifest`, :func:`verify_run`)."""
    return ManifestRecord.from_json(manifest, where=where)


def read_manifest(root: str | Path, name: str = MANIFEST) -> ManifestRecord:
    """``root/name`` as a :class:`ManifestRecord` (``IntegrityError`` when it is missing, damaged or
    lacks its file list; the entries themselves are checked by :func:`load_manifest` and
    :func:`verify_run`)."""
    path = Path(root) / name
    if not path.is_file():
        raise IntegrityError(f"{Path(root)}: no {name}; not a finished pqflow run")
    data = read_json_checked(path)
    return manifest_record(data, where=str(path))
