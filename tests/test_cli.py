"""The command line: clear errors with exit code 2, nothing written, caution shown."""

from __future__ import annotations

from typer.testing import CliRunner

from pqflow import CAUTION
from pqflow.cli import app

runner = CliRunner()


def test_bad_configuration_exits_2_and_writes_nothing(small_config, tmp_path):
    cfg = small_config(hull_white={"volatility": -0.01})
    out = tmp_path / "never"
    result = runner.invoke(app, ["run", str(cfg), "--out", str(out)])
    assert result.exit_code == 2
    assert "hull_white.volatility" in result.output and str(cfg.name) in result.output
    assert not out.exists()


def test_existing_directory_without_overwrite_is_refused(small_config, tmp_path):
    out = tmp_path / "taken"
    out.mkdir()
    (out / "notes.txt").write_text("earlier work")
    result = runner.invoke(app, ["run", str(small_config()), "--out", str(out)])
    assert result.exit_code == 2
    assert "--overwrite" in result.output
    assert (out / "notes.txt").read_text() == "earlier work"
    # Even with --overwrite, a directory that is not a pqflow run is not replaced.
    result = runner.invoke(app, ["run", str(small_config()), "--out", str(out), "--overwrite"])
    assert result.exit_code == 2 and "does not look like a pqflow run" in result.output


def test_check_command_and_caution_in_help(small_config):
    result = runner.invoke(app, ["check", str(small_config())])
    assert result.exit_code == 0, result.output
    assert "columns (" in result.output and "zcb_10y" in result.output
    result = runner.invoke(app, ["check", str(small_config()), "--json"])
    assert result.exit_code == 0, result.output
    assert "market_prices_of_risk" in result.output
    help_text = runner.invoke(app, ["--help"]).output
    assert "qualified" in help_text.replace("\n", " ")
    assert "sign-off" in CAUTION


def test_reading_commands_check_the_manifest_first(small_config, tmp_path):
    from pqflow.pipeline import run_in_process

    out = tmp_path / "run"
    run_in_process(small_config(), out)
    part = out / "scenarios" / "real_world" / "part-00002.parquet"
    part.write_bytes(part.read_bytes()[:-10])  # truncated
    for args in (["report", str(out)], ["value", str(out), "--liabilities", "x.toml"],
                 ["compare", str(out), str(out)]):
        result = runner.invoke(app, args)
        assert result.exit_code == 2, (args, result.output)
        assert "part-00002.parquet" in result.output


def test_value_then_report_shows_the_liability_section(tmp_path):
    from conftest import REPO

    from pqflow.pipeline import run_in_process

    out = tmp_path / "run"
    run_in_process(REPO / "scenario_configs" / "demo_typed.toml", out, scenarios=200)
    result = runner.invoke(
        app, ["value", str(out), "--liabilities", str(REPO / "scenario_configs" / "demo_liabilities.toml")]
    )
    assert result.exit_code in (0, 1), result.output  # 1 only if the two sets disagree
    assert (out / "valuation" / "liability_values.csv").is_file()
    html = (out / "validation" / "report.html").read_text(encoding="utf-8")
    assert 'id="liabilities"' in html and "Larkspur Mutual Life (invented)" in html
    assert runner.invoke(app, ["verify", str(out)]).exit_code == 0
