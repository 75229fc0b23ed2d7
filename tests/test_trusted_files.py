"""A finished run is read only through its manifest: files it does not list are reported and
never read, its paths stay inside the run, a damaged manifest is named, export checks before
its first row, the valuation folder's own manifest is honoured, and the report escapes every
name it shows. Each refusal: exit 2, one ``error:`` line naming the file, no traceback.

Sources: the manifest format is pqflow's own (``storage/manifest.py``); the escaping rule is
the HTML living standard's (``<``, ``>``, ``&``, quotes in text and attributes), applied with
Python's ``html.escape``."""

from __future__ import annotations

import copy
import hashlib
import json
import shutil
import time
from pathlib import Path

import pytest
from cli_helpers import assert_clean_error, invoke
from conftest import REPO, write_toml

LIABILITIES = REPO / "scenario_configs" / "demo_liabilities.toml"
READERS = ("verify", "report", "value", "compare", "export")


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory, demo_config_dict) -> Path:
    from pqflow.pipeline import run_in_process

    root = tmp_path_factory.mktemp("trusted")
    data = copy.deepcopy(demo_config_dict)
    data["simulation"].update({"scenarios": 200, "batch_size": 50})  # horizon 50: the demo book's
    out = root / "run"
    run_in_process(write_toml(root / "run.toml", data), out)
    return out


@pytest.fixture
def run_copy(finished_run, tmp_path) -> Path:
    out = tmp_path / "run"
    shutil.copytree(finished_run, out)
    return out


def reader_args(command: str, run: Path, tmp_path: Path) -> list:
    return {
        "verify": ["verify", run],
        "report": ["report", run],
        "value": ["value", run, "--liabilities", LIABILITIES],
        "compare": ["compare", run, run],
        "export": ["export", run, "--measure", "real_world", "--out", tmp_path / "slice.csv"],
    }[command]


def edit_manifest(run: Path, change) -> None:
    path = run / "manifest.json"
    manifest = json.loads(path.read_text())
    change(manifest)
    path.write_text(json.dumps(manifest))


# ------------------------------------------------------------------- 4. unlisted files

def test_a_copied_in_part_is_reported_and_never_read(run_copy, tmp_path):
    from pqflow.storage.scenario_set import ScenarioSet

    rw = run_copy / "scenarios" / "real_world"
    listed = sorted(p.name for p in rw.iterdir())
    assert listed == [f"part-0000{i}.parquet" for i in range(4)]
    shutil.copy(rw / "part-00003.parquet", rw / "part-00004.parquet")
    for command in ("verify", "value", "report"):
        assert_clean_error(invoke(*reader_args(command, run_copy, tmp_path)), 2,
                           "scenarios/real_world/part-00004.parquet", "not listed")
    # Readers of a finished run take the manifest's list: 200 scenarios, not 250.
    reader = ScenarioSet(run_dir=run_copy, measure="real_world")
    assert [p.name for p in reader.parts()] == listed
    assert sum(arrays["short_rate"].shape[0] for _, arrays in reader.iter_arrays(["short_rate"])) == 200
    assert not (run_copy / "valuation").exists()


# ---------------------------------------------------------- 5. paths and damaged manifests

@pytest.mark.parametrize("bad_path", ["/dev/zero", "../outside.parquet", "scenarios/../../x", "C:/x"])
@pytest.mark.parametrize("command", READERS)
def test_manifest_paths_must_stay_inside_the_run(run_copy, tmp_path, command, bad_path):
    edit_manifest(run_copy, lambda m: m["files"][0].update(path=bad_path))
    started = time.perf_counter()
    assert_clean_error(invoke(*reader_args(command, run_copy, tmp_path)), 2, "manifest.json", "files[0].path")
    assert time.perf_counter() - started < 10  # used to hang reading /dev/zero
    assert not (tmp_path / "slice.csv").exists() and not (run_copy / "valuation").exists()


def test_a_listed_file_replaced_by_a_link_out_of_the_run_is_refused(run_copy, tmp_path):
    target = run_copy / "calibration.json"
    target.unlink()
    target.symlink_to("/dev/zero")
    assert_clean_error(invoke("verify", run_copy), 2, "manifest.json", "calibration.json", "outside the run")


@pytest.mark.parametrize(
    "damage, needle",
    [
        (lambda text: text[: len(text) // 2], "not valid JSON"),
        (lambda text: json.dumps({k: v for k, v in json.loads(text).items() if k != "files"}), "'files'"),
        (lambda text: json.dumps({**json.loads(text), "files": [{"path": "calibration.json"}]}), "files[0].bytes"),
        (lambda text: "[]", "'files'"),
    ],
)
@pytest.mark.parametrize("command", READERS)
def test_truncated_or_malformed_manifest_is_named(run_copy, tmp_path, command, damage, needle):
    path = run_copy / "manifest.json"
    path.write_text(damage(path.read_text()))
    assert_clean_error(invoke(*reader_args(command, run_copy, tmp_path)), 2, "manifest.json", needle)


# ------------------------------------------------------------------------------ 6. export

def test_export_of_a_tampered_run_writes_no_row(run_copy):
    part = run_copy / "scenarios" / "real_world" / "part-00003.parquet"
    data = bytearray(part.read_bytes())
    data[len(data) // 2] ^= 0xFF  # same size, other content: only the sha256 can tell
    part.write_bytes(bytes(data))
    result = invoke("export", run_copy, "--measure", "real_world")  # to standard output
    assert_clean_error(result, 2, "part-00003.parquet", "sha256")
    assert "scenario,time" not in result.output and "\n0," not in result.output


def test_export_out_replaces_a_file_only_with_overwrite(run_copy, tmp_path):
    target = tmp_path / "slice.csv"
    target.write_text("earlier export\n")
    args = ["export", run_copy, "--measure", "market_consistent", "--scenarios", "0:4", "--out", target]
    assert_clean_error(invoke(*args), 2, str(target), "--overwrite")
    assert target.read_text() == "earlier export\n"
    assert not target.with_name("slice.csv.meta.json").exists()
    result = invoke(*args, "--overwrite")
    assert result.exit_code == 0, result.output
    assert target.read_text().startswith("scenario,time")


# ------------------------------------------------------------------ 7. valuation manifest

def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_report_refuses_a_changed_or_unlisted_valuation_file(run_copy):
    # `pqflow value` records its outputs in valuation/manifest.json; every reading command checks it.
    result = invoke("value", run_copy, "--liabilities", LIABILITIES)
    assert result.exit_code in (0, 1), result.output
    folder = run_copy / "valuation"
    assert (folder / "manifest.json").is_file()
    assert invoke("report", run_copy).exit_code == 0
    summary = folder / "summary.json"
    original = summary.read_text()
    summary.write_text(original.replace('"currency"', '"currency" ', 1))  # an edit the report would show
    assert_clean_error(invoke("report", run_copy), 2, "summary.json", "changed")
    summary.write_text(original)
    (folder / "extra.csv").write_text("a,b\n1,2\n")
    assert_clean_error(invoke("report", run_copy), 2, "extra.csv", "not in the valuation manifest")
    assert_clean_error(invoke("verify", run_copy), 2, "extra.csv")


# ------------------------------------------------------------------ 13. hostile names

HOSTILE = '<img src=x onerror="alert(1)">&\''


def test_report_escapes_hostile_names_in_every_field_it_shows(tmp_path, monkeypatch):
    from pqflow.pipeline import run_in_process
    from pqflow.report import build_report_html

    demo = REPO / "scenario_configs" / "demo.toml"
    source = REPO / "scenario_configs" / "market_data" / "veldmark_2026q3"
    text = demo.read_text(encoding="utf-8")
    for csv in sorted(source.glob("*.csv")):  # every market-data file gets a name starting with "<"
        hostile_name = f"{HOSTILE}{csv.name}"
        shutil.copy(csv, tmp_path / hostile_name)
        text = text.replace(f'"market_data/veldmark_2026q3/{csv.name}"', json.dumps(hostile_name))
    text = text.replace('description = "Invented', f"description = {json.dumps(HOSTILE)} # Invented", 1)
    text = text.replace("scenarios = 2000", "scenarios = 40").replace("horizon_years = 50", "horizon_years = 10")
    (tmp_path / "hostile.toml").write_text(text, encoding="utf-8")
    monkeypatch.chdir(tmp_path)  # relative paths, as a user in that folder types them
    run_in_process("hostile.toml", "run")
    html = build_report_html(tmp_path / "run")
    assert "<img" not in html and "onerror=\"" not in html
    assert "&lt;img src=x onerror=&quot;alert(1)&quot;&gt;&amp;&#x27;inflation_swaps.csv" in html  # shown, escaped
