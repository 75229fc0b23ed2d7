"""Runs written to a filesystem that is not a local path (the object-store code path).

pyarrow's in-memory ``_MockFileSystem`` stands in for an object store, and a
``SubTreeFileSystem`` over a local folder for any non-local filesystem whose files can be
inspected; the reference is the same run written to a local path, compared by sha256
(FIPS 180-4, via hashlib).
"""

from __future__ import annotations

import json

import pyarrow.fs as pafs
import pytest
from conftest import run_digests

from pqflow.errors import IntegrityError, RunDirectoryError
from pqflow.storage.filesystem import remote_staging, resolve_target, verify_target


def _local_digests(run_dir):
    return run_digests(run_dir)


def test_run_to_a_non_local_filesystem_matches_the_local_run(small_config, tmp_path, monkeypatch):
    from pqflow.pipeline import run_in_process

    monkeypatch.chdir(tmp_path)  # the local staging folder goes to ./.pqflow/staging
    cfg = small_config()
    local = tmp_path / "local"
    run_in_process(cfg, local)

    (tmp_path / "bucket").mkdir()
    store = pafs.SubTreeFileSystem(str(tmp_path / "bucket"), pafs.LocalFileSystem())
    result = run_in_process(cfg, "runs/q3", filesystem=store)
    assert result["out_dir"] == "runs/q3"
    published = tmp_path / "bucket" / "runs" / "q3"
    assert _local_digests(published) == _local_digests(local)
    manifest = verify_target(resolve_target("runs/q3", filesystem=store))
    assert manifest["files"] == json.loads((local / "manifest.json").read_text())["files"]
    assert not remote_staging(resolve_target("runs/q3", filesystem=store)).exists()
    assert not [p for p in published.rglob(".*")]  # no temporary names left

    # The local rules hold: no silent overwrite; a changed object is named by verify_target.
    with pytest.raises(RunDirectoryError, match="--overwrite"):
        run_in_process(cfg, "runs/q3", filesystem=store)
    part = published / "scenarios" / "real_world" / "part-00002.parquet"
    data = bytearray(part.read_bytes())
    data[100] ^= 0xFF
    part.write_bytes(bytes(data))
    with pytest.raises(IntegrityError, match="part-00002.parquet: content changed"):
        verify_target(resolve_target("runs/q3", filesystem=store))
    run_in_process(cfg, "runs/q3", filesystem=store, overwrite=True)
    assert _local_digests(published) == _local_digests(local)


def test_in_memory_store_and_unfinished_prefix(small_config, tmp_path, monkeypatch):
    from pqflow.pipeline import run_in_process

    monkeypatch.chdir(tmp_path)
    store = pafs._MockFileSystem()
    run_in_process(small_config(), "bucket/run", filesystem=store)
    target = resolve_target("bucket/run", filesystem=store)
    manifest = verify_target(target)
    assert len([f for f in manifest["files"] if f["path"].endswith(".parquet")]) == 8
    # An upload cut short (no manifest yet) is not a run, whatever it holds.
    store.delete_file("bucket/run/manifest.json")
    with pytest.raises(IntegrityError, match="not a finished pqflow run"):
        verify_target(target)
    with pytest.raises(RunDirectoryError, match="no manifest.json"):
        run_in_process(small_config(), "bucket/run", filesystem=store, overwrite=True)


def test_uris_are_resolved():
    assert resolve_target("runs/x").is_local
    assert resolve_target("file:///tmp/pqflow-x").local.as_posix() == "/tmp/pqflow-x"
    with pytest.raises(RunDirectoryError, match="not a filesystem URI"):
        resolve_target("nosuchscheme://bucket/x")
