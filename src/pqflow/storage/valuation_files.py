"""The valuation folder of a run (``RUN/valuation``): written like a run, checked like a run.

Layout::

    RUN/.valuation.lock       held while a valuation writes (pid, host, time)
    RUN/.valuation.staging/   the valuation being written; renamed to RUN/valuation when done
    RUN/valuation/
        manifest.json         what was valued (the run's id and the sha256 of its manifest, the
                              portfolio file's sha256) and every file with bytes and sha256
        summary.json, liability_values.{parquet,csv}, liability_cash_flows.{parquet,csv}

The same rules as :mod:`pqflow.storage.rundir`: the tables are built in the staging folder and
published by rename, so a failed valuation leaves any earlier one untouched; earlier results are
replaced only with ``overwrite``. :func:`verify_valuation` checks every file against the
valuation manifest and that the manifest belongs to the run beside it (``pqflow verify``).
File paths in the manifest and in ``summary.json`` are relative to the valuation folder.
"""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

from pqflow.errors import IntegrityError, RunDirectoryError
from pqflow.storage.jsonio import read_json, write_json_atomic
from pqflow.storage.manifest import MANIFEST, build_manifest
from pqflow.storage.parquet import file_sha256
from pqflow.storage.results import replace_directory
from pqflow.storage.rundir import staging_path

__all__ = [
    "VALUATION_MANIFEST",
    "check_valuation_target",
    "fresh_valuation_staging",
    "publish_valuation_files",
    "verify_valuation",
    "run_manifest_sha256",
]

VALUATION_MANIFEST = MANIFEST  # valuation/manifest.json


def run_manifest_sha256(run_dir: str | Path) -> str | None:
    """sha256 of the run's ``manifest.json`` (None before the run is published)."""
    path = Path(run_dir) / MANIFEST
    return file_sha256(path) if path.is_file() else None


def check_valuation_target(out: str | Path, overwrite: bool) -> None:
    """Refuse a valuation folder that already holds results unless ``overwrite``; refuse to
    overwrite a folder that does not look like valuation results at all."""
    out = Path(out).absolute()
    if not out.exists():
        return
    if not out.is_dir():
        raise RunDirectoryError(f"{out} exists and is not a directory")
    if not any(out.iterdir()):
        return
    if not overwrite:
        raise RunDirectoryError(
            f"{out} already holds valuation results; pass --overwrite to replace them (they are replaced "
            "only once the new valuation has succeeded) or choose another --out"
        )
    if not ((out / VALUATION_MANIFEST).is_file() or (out / "summary.json").is_file()):
        raise RunDirectoryError(f"{out} holds files that are not pqflow valuation results; "
                                "pqflow will not overwrite it")


def fresh_valuation_staging(out: str | Path) -> Path:
    """An empty staging folder beside ``out`` (an interrupted attempt's leftovers removed)."""
    staging = staging_path(out)
    if staging.exists():
        shutil.rmtree(staging)
    staging.mkdir(parents=True)
    return staging


def publish_valuation_files(staging: str | Path, out: str | Path, *, header: dict[str, Any],
                            overwrite: bool) -> dict[str, Any]:
    """Write the valuation manifest into ``staging`` (every file with bytes and sha256), then
    publish it to ``out`` by rename; returns the manifest."""
    staging = Path(staging)
    out = Path(out).absolute()
    check_valuation_target(out, overwrite)
    manifest = build_manifest(staging, header={"kind": "pqflow valuation", **header})
    write_json_atomic(staging / VALUATION_MANIFEST, manifest)
    replace_directory(staging, out)  # the earlier results go only once the new ones are in place
    return manifest


def verify_valuation(run_dir: str | Path, out: str | Path | None = None) -> dict[str, Any] | None:
    """Check the valuation folder (default ``run_dir/valuation``) against its manifest and the
    run it belongs to. Returns the manifest, or None when there is no valuation folder.

    A valuation folder without a manifest (written before valuations had one) cannot be
    checked: that raises too, naming the remedy.
    """
    run_dir = Path(run_dir)
    out = Path(out) if out is not None else run_dir / "valuation"
    if not out.exists():
        return None
    mpath = out / VALUATION_MANIFEST
    if not mpath.is_file():
        raise IntegrityError(
            f"{out}: no {VALUATION_MANIFEST}; these valuation results cannot be checked (written by an older "
            "pqflow?): value the run again with pqflow value RUN --liabilities FILE --overwrite"
        )
    manifest = read_json(mpath)
    problems = []
    listed = set()
    for entry in manifest.get("files", []):
        listed.add(entry["path"])
        path = out / entry["path"]
        if not path.is_file():
            problems.append(f"{entry['path']}: missing")
        elif path.stat().st_size != entry["bytes"]:
            problems.append(f"{entry['path']}: size {path.stat().st_size} bytes, manifest says {entry['bytes']}")
        elif file_sha256(path) != entry["sha256"]:
            problems.append(f"{entry['path']}: content changed (sha256 differs from the manifest)")
    for path in sorted(out.rglob("*")):
        rel = path.relative_to(out).as_posix()
        if path.is_file() and rel != VALUATION_MANIFEST and not path.name.startswith(".") and rel not in listed:
            problems.append(f"{rel}: not in the valuation manifest")
    expected = manifest.get("run_manifest_sha256")
    actual = run_manifest_sha256(run_dir)
    if expected is not None and actual is not None and expected != actual:
        problems.append(f"valued a different run (its manifest sha256 {expected[:12]}, this run's {actual[:12]})")
    if len(problems) == 1:  # one problem, one line (as for the run's own manifest)
        raise IntegrityError(f"{out}: {problems[0]} ({VALUATION_MANIFEST})")
    if problems:
        raise IntegrityError(f"{out}: files do not match {VALUATION_MANIFEST}:\n  " + "\n  ".join(problems))
    return manifest
