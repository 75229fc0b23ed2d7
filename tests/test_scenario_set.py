"""One read of each part for every check (storage.scenario_set), and a part's sha256 taken while
it is written (storage.parquet.write_part_hashed)."""

from __future__ import annotations

import hashlib

import numpy as np
import pyarrow.parquet as pq
import pytest

from pqflow.storage import parquet as parquet_mod
from pqflow.storage.parquet import batch_table, parquet_write_kwargs, write_part, write_part_hashed
from pqflow.storage.scenario_set import ScenarioSet, SetPass
from pqflow.validation.moments import Moments
from pqflow.validation.run_files import add_gather, add_moments, gather_at_times, stream_moments

TIMES = np.array([0.0, 0.5, 1.0, 1.5, 2.0])


def _write_set(run_dir, parts=3, paths=6):
    rng = np.random.default_rng(7)
    for b in range(parts):
        cols = {c: rng.lognormal(size=(paths, TIMES.size)) for c in ("a", "b", "c")}
        table = batch_table(cols, TIMES, first_scenario=b * paths, metadata={"pqflow.antithetic": "false"})
        write_part(table, run_dir / "scenarios" / "real_world" / f"part-{b:05d}.parquet")
    return ScenarioSet(run_dir=run_dir, measure="real_world")


def test_hash_while_writing_gives_the_bytes_and_digest_of_a_plain_write(tmp_path):
    # sha256 as hashlib computes it over the file's bytes (FIPS 180-4; common practice)
    rng = np.random.default_rng(1)
    table = batch_table({"x": rng.standard_normal((50, TIMES.size))}, TIMES, first_scenario=0,
                        metadata={"pqflow.measure": "real_world"})
    path, digest = write_part_hashed(table, tmp_path / "a" / "part-00000.parquet")
    plain = tmp_path / "plain.parquet"
    pq.write_table(table, plain, **parquet_write_kwargs(table))
    assert path.read_bytes() == plain.read_bytes()
    assert digest == hashlib.sha256(plain.read_bytes()).hexdigest() == parquet_mod.file_sha256(path)
    assert not list(path.parent.glob(".*tmp*"))


def test_one_pass_reads_each_part_once_and_feeds_what_each_reader_would_read_alone(tmp_path, monkeypatch):
    scenario_set = _write_set(tmp_path)
    alone_times, alone = stream_moments(scenario_set, ["a", "b"], lambda t, c: {"ab": c["a"] * c["b"]})
    g_times, g_alone = gather_at_times(scenario_set, ["c"], [0.5, 2.0])
    reads = []
    real = parquet_mod.read_part
    monkeypatch.setattr("pqflow.storage.scenario_set.read_part", lambda p, cols: reads.append(p) or real(p, cols))
    scan = SetPass(scenario_set=scenario_set)
    moments = add_moments(scan, ["a", "b"], lambda t, c: {"ab": c["a"] * c["b"]})
    gather = add_gather(scan, ["c"], [0.5, 2.0])
    seen = []
    scan.add(["b"], lambda t, c: seen.append(sorted(c)))
    assert scan.run() == 3
    assert len(reads) == 3 and len(set(reads)) == 3  # each part once for three readers
    assert seen == [["b"]] * 3  # a reader gets its own columns only
    times, acc = moments()
    np.testing.assert_array_equal(times, alone_times)
    for field in ("mean", "m2", "m3"):  # bit for bit: the same arrays in the same order
        np.testing.assert_array_equal(getattr(acc["ab"], field), getattr(alone["ab"], field))
    kept, data = gather()
    np.testing.assert_array_equal(kept, g_times)
    np.testing.assert_array_equal(data["c"], g_alone["c"])
    # and the moments are those of all paths at once (Chan, Golub and LeVeque's pairwise merge)
    all_ab = np.concatenate([c["a"] * c["b"] for _, c in scenario_set.iter_arrays(["a", "b"])])
    np.testing.assert_allclose(acc["ab"].mean, Moments.of(all_ab).mean, rtol=1e-13)


def test_head_reads_the_grid_and_the_first_values(tmp_path):
    scenario_set = _write_set(tmp_path)
    times, first = scenario_set.head(["a"])
    full_times, cols = next(scenario_set.iter_arrays(["a"]))
    np.testing.assert_array_equal(times, full_times)
    assert first["a"] == float(cols["a"][0, 0])


def test_an_empty_set_names_its_folder(tmp_path):
    from pqflow.errors import IntegrityError

    scan = SetPass(scenario_set=ScenarioSet(run_dir=tmp_path, measure="real_world"))
    scan.add(["a"], lambda t, c: None)
    with pytest.raises(IntegrityError, match="no scenario parts"):
        scan.run()


def test_the_manifest_uses_the_digest_taken_while_writing_only_while_the_size_holds(tmp_path, monkeypatch):
    from pqflow.storage import manifest as manifest_mod

    rng = np.random.default_rng(3)
    table = batch_table({"x": rng.standard_normal((20, TIMES.size))}, TIMES, first_scenario=0, metadata={})
    path, digest = write_part_hashed(table, tmp_path / "scenarios" / "real_world" / "part-00000.parquet")
    rel = "scenarios/real_world/part-00000.parquet"
    hashed = []
    real = manifest_mod.file_sha256
    monkeypatch.setattr(manifest_mod, "file_sha256", lambda p: hashed.append(p) or real(p))
    entry = manifest_mod.build_manifest(tmp_path, header={}, known={rel: (digest, path.stat().st_size)})["files"][0]
    assert entry["sha256"] == digest and hashed == []  # not read again
    # a file whose size is not the size written is hashed afresh (here the record says otherwise)
    entry = manifest_mod.build_manifest(tmp_path, header={}, known={rel: ("0" * 64, 10**9)})["files"][0]
    assert len(hashed) == 1 and entry["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest() == digest
