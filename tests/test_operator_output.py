"""Output an operator can follow: progress lines in a log, whole names in piped tables, the
version flag, JSON-only output, literal help text and a closing hint that works as printed.

The expectations are common practice for command-line tools (a machine-readable mode prints
only its format; a hint printed for the user must run as printed) and simple arithmetic (the
time remaining is the mean time per part so far times the parts left).
"""

from __future__ import annotations

import io
import json
import os
import subprocess
import sys
from pathlib import Path

from typer.testing import CliRunner

from pqflow import __version__
from pqflow.cli import _self_command, app
from pqflow.pipeline.progress import LineProgress, StageLines, format_seconds, progress_reporter, stage_reporter

runner = CliRunner()


class _Clock:
    def __init__(self) -> None:
        self.now = 100.0

    def __call__(self) -> float:
        return self.now


def test_progress_lines_count_parts_elapsed_and_remaining():
    clock, out = _Clock(), io.StringIO()
    p = LineProgress(24, kept=4, interval=0, stream=out, clock=clock).start()
    assert p.line() == ("4 of 24 parts generated (4 kept from the interrupted run), 0 s elapsed, "
                        "time remaining not known yet")
    clock.now += 30.0
    p.advance()
    p.advance()
    # 2 new parts in 30 s: 15 s a part, 18 parts left -> 270 s (common practice: linear rate).
    assert p.line() == ("6 of 24 parts generated (4 kept from the interrupted run), 30 s elapsed, "
                        "about 4 min 30 s remaining")
    for _ in range(18):
        p.advance()
    clock.now += 5.0
    p.stop()
    lines = out.getvalue().splitlines()
    assert lines[0].startswith("progress: 4 of 24")
    assert lines[-1] == "progress: 24 of 24 parts generated (4 kept from the interrupted run), 35 s elapsed"


def test_progress_lines_keep_coming_while_no_part_finishes():
    out = io.StringIO()
    with LineProgress(3, interval=0.05, stream=out):
        import time

        time.sleep(0.5)
    lines = out.getvalue().splitlines()
    assert len(lines) >= 4  # start, several ticks, end, although no part finished
    assert all(line.startswith("progress: 0 of 3 parts generated") for line in lines)


def test_stage_lines_beat_while_a_step_runs(capsys):
    clock, out = _Clock(), io.StringIO()
    beat = StageLines("validating the written files", interval=0, stream=out, clock=clock).start()
    clock.now += 12.0
    assert beat.line() == "validating the written files, 12 s elapsed"
    clock.now += 9.0
    beat.stop()
    assert out.getvalue().splitlines() == ["progress: validating the written files, 0 s elapsed",
                                           "progress: validating the written files, done in 21 s"]
    with stage_reporter("checking", enabled=True, terminal=False, interval=0.05):
        import time

        time.sleep(0.3)
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) >= 3 and lines[0].startswith("progress: checking, ") and " done in " in lines[-1]


def test_format_seconds():
    assert [format_seconds(x) for x in (0, 42.4, 60, 200, 3600, 4000)] == [
        "0 s", "42 s", "1 min 0 s", "3 min 20 s", "1 h 0 min", "1 h 6 min"]


def test_reporter_draws_lines_without_a_terminal_and_nothing_when_disabled(capsys):
    with progress_reporter(2, 0, enabled=True, terminal=False, interval=60) as advance:
        advance()
        advance()
    text = capsys.readouterr().out
    assert "progress: 0 of 2 parts generated" in text and "progress: 2 of 2 parts generated" in text
    with progress_reporter(2, 0, enabled=False) as advance:
        advance()
    assert capsys.readouterr().out == ""


def test_version_flag_and_command():
    for args in (["--version"], ["version"]):
        result = runner.invoke(app, args)
        assert result.exit_code == 0 and result.output.strip() == __version__


def test_check_json_prints_only_json(small_config):
    result = runner.invoke(app, ["check", str(small_config()), "--json"])
    assert result.exit_code == 0, result.output
    params = json.loads(result.output)  # nothing but the JSON document
    assert "market_prices_of_risk" in params


def test_run_help_shows_the_defaults_literally(monkeypatch):
    monkeypatch.setenv("COLUMNS", "240")  # one line per option, so the text can be searched
    text = runner.invoke(app, ["run", "--help"]).output
    assert "[execution] workers, else 2" in text
    assert "[execution] runner, else threads" in text


def test_closing_hint_names_the_executable_when_it_is_not_on_path(monkeypatch, tmp_path):
    exe = Path(sys.executable).parent / "pqflow"
    monkeypatch.setattr(sys, "argv", [str(exe), "run"])
    monkeypatch.setenv("PATH", "/usr/bin:/bin")
    hint = _self_command()
    assert hint == str(exe.absolute())
    # As printed, in a fresh shell with an empty environment, from another folder.
    fresh = subprocess.run(["env", "-i", "/bin/sh", "-c", f"{hint} --version"], cwd=tmp_path,
                           capture_output=True, text=True, timeout=120)
    assert fresh.returncode == 0 and fresh.stdout.strip() == __version__, fresh.stderr
    monkeypatch.setenv("PATH", f"{exe.parent}{os.pathsep}/usr/bin:/bin")
    assert _self_command() == "pqflow"  # on PATH: the short name works as printed
