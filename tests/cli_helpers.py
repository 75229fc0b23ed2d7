"""What every refused command must look like: its exit code, exactly one ``error:`` line naming
the place, no traceback."""

from __future__ import annotations

from typing import Any

from typer.testing import CliRunner

from pqflow.cli import app

runner = CliRunner()


def invoke(*args: Any) -> Any:
    return runner.invoke(app, [str(a) for a in args])


def error_lines(output: str) -> list[str]:
    return [line for line in output.splitlines() if line.startswith("error:")]


def assert_clean_error(result: Any, code: int, *needles: str) -> str:
    """``result`` exited ``code`` with one ``error:`` line holding every needle, and no traceback.
    Returns that line."""
    out = result.output
    assert result.exit_code == code, (result.exit_code, out)
    assert "Traceback" not in out, out
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(result.exception)
    lines = error_lines(out)
    assert len(lines) == 1, out
    for needle in needles:
        assert needle in lines[0], (needle, lines[0])
    return lines[0]
