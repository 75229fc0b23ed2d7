"""`pqflow export`: a streamed slice equals the Parquet data; bad requests give clear errors.

References: the CSV is parsed with Python's own ``csv`` module and ``float`` (the shortest
round-trip decimal form, as pyarrow writes it, parses back to the same double: IEEE 754 /
Python float repr, common practice), and compared exactly with the parts read by
``pyarrow.parquet.read_table``.
"""

from __future__ import annotations

import csv
import json

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from typer.testing import CliRunner

from pqflow.errors import IntegrityError
from pqflow.storage.export import ExportError, export_slice, parse_scenario_range


@pytest.fixture
def run_dir(small_config, tmp_path):
    from pqflow.pipeline import run_in_process

    out = tmp_path / "run"
    run_in_process(small_config(), out)
    return out


def _reference(run_dir, measure, columns, first, stop):
    table = pa.concat_tables(pq.read_table(p) for p in sorted((run_dir / "scenarios" / measure).glob("part-*.parquet")))
    scen = table.column("scenario").to_numpy()
    keep = (scen >= first) & (scen < stop)
    return {c: table.column(c).to_numpy()[keep] for c in ["scenario", "time", *columns]}


def test_csv_slice_equals_the_parquet_data(run_dir, tmp_path):
    out = tmp_path / "slice.csv"
    cols = ["short_rate", "zcb_10y", "q_density"]
    result = export_slice(run_dir, measure="real_world", columns=cols, scenarios="95:205", out=out)
    ref = _reference(run_dir, "real_world", cols, 95, 205)  # straddles parts 0, 1 and 2
    with open(out, newline="") as fh:
        rows = list(csv.reader(fh))
    assert rows[0] == ["scenario", "time", *cols]
    body = rows[1:]
    assert len(body) == result.rows == ref["scenario"].size
    assert [int(r[0]) for r in body] == ref["scenario"].tolist()
    for j, c in enumerate(["time", *cols], start=1):
        got = np.array([float(r[j]) for r in body])
        assert np.array_equal(got, ref[c]), c  # exact: round-trip decimal form
    meta = json.loads((tmp_path / "slice.csv.meta.json").read_text())
    assert meta["measure"] == "real_world" and meta["scenarios"]["first"] == 95
    assert [c["name"] for c in meta["columns"]] == ["scenario", "time", *cols]
    assert "zero-coupon" in meta["columns"][3]["unit"]
    assert result.parts_read == 3


def test_parquet_subset_and_cli(run_dir, tmp_path):
    from pqflow.cli import app

    out = tmp_path / "subset.parquet"
    res = CliRunner().invoke(app, ["export", str(run_dir), "--measure", "market_consistent", "--format", "parquet",
                                   "--columns", "cash_account,p_density", "--scenarios", "0:3", "--out", str(out)])
    assert res.exit_code == 0, res.output
    got = pq.read_table(out)
    ref = _reference(run_dir, "market_consistent", ["cash_account", "p_density"], 0, 3)
    assert got.column_names == list(ref)
    for c in ref:
        assert np.array_equal(got.column(c).to_numpy(), ref[c]), c
    assert got.schema.metadata[b"pqflow.measure"] == b"market_consistent"
    res = CliRunner().invoke(app, ["export", str(run_dir), "--measure", "real_world", "--scenarios", "7", "--columns",
                                   "deflator"])
    assert res.exit_code == 0, res.output
    lines = res.stdout.strip().splitlines()
    assert lines[0] == "scenario,time,deflator" and len(lines) == 1 + 21  # 20 years annual: 21 times
    assert all(line.startswith("7,") for line in lines[1:])


def test_bad_requests_give_clear_errors(run_dir, tmp_path):
    with pytest.raises(ExportError, match=r"unknown column\(s\) zcb_11y.*available: short_rate"):
        export_slice(run_dir, measure="real_world", columns=["zcb_11y"], out=tmp_path / "x.csv")
    with pytest.raises(ExportError, match="has 400 scenarios"):
        export_slice(run_dir, measure="real_world", scenarios="390:401", out=tmp_path / "x.csv")
    with pytest.raises(ExportError, match="STOP must be greater"):
        parse_scenario_range("5:5")
    with pytest.raises(ExportError, match="FIRST:STOP"):
        parse_scenario_range("a:b")
    with pytest.raises(ExportError, match="unknown measure"):
        export_slice(run_dir, measure="p", out=tmp_path / "x.csv")
    with pytest.raises(ExportError, match="unknown format"):
        export_slice(run_dir, measure="real_world", fmt="xlsx", out=tmp_path / "x.csv")
    assert not (tmp_path / "x.csv").exists()
    assert parse_scenario_range("10:") == (10, None) and parse_scenario_range(":4") == (None, 4)


def test_a_changed_part_is_named(run_dir, tmp_path):
    part = run_dir / "scenarios" / "real_world" / "part-00001.parquet"
    data = bytearray(part.read_bytes())
    data[len(data) // 2] ^= 0xFF
    part.write_bytes(bytes(data))
    # A slice that does not touch the changed part still exports ...
    export_slice(run_dir, measure="real_world", scenarios="0:100", out=tmp_path / "ok.csv")
    # ... one that does is refused, naming the part, and leaves no half-written file.
    with pytest.raises(IntegrityError, match="part-00001.parquet: content changed"):
        export_slice(run_dir, measure="real_world", scenarios="50:150", out=tmp_path / "bad.csv")
    assert not (tmp_path / "bad.csv").exists()
    part.write_bytes(bytes(data[:1000]))
    with pytest.raises(IntegrityError, match="part-00001.parquet: size"):
        export_slice(run_dir, measure="real_world", out=tmp_path / "bad.csv")
