"""The run is written once (``pqflow.jobs.run.run_quarter``): the Prefect flow and ``run_in_process``
only choose how its steps execute. Checked here: the serial executor runs the steps in the run's
order, a failing step leaves nothing behind, and the flow module holds no second copy of the
staging, lock, resume or publish logic (common practice: one implementation per behaviour).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from pqflow.jobs.run import SerialExecutor, Step, run_quarter

REPO = Path(__file__).resolve().parents[1]


class _Recording(SerialExecutor):
    def __init__(self, fail_at: str | None = None) -> None:
        self.calls: list[str] = []
        self.fail_at = fail_at

    def _note(self, step: Step) -> None:
        self.calls.append(step.name)
        if step.name == self.fail_at:
            raise OSError(f"injected failure in {step.name}")

    def run(self, step, *args):
        self._note(step)
        return super().run(step, *args)

    def submit(self, step, *args):
        self._note(step)
        return super().submit(step, *args)


def test_the_serial_executor_runs_the_steps_in_order_and_a_failure_leaves_no_trace(small_config, tmp_path):
    cfg = small_config()  # 4 + 4 parts
    ex = _Recording()
    out = tmp_path / "run"
    result = run_quarter(cfg, out, executor=ex)
    assert ex.calls == ["calibrate", *["generate-part"] * 8, "validate", "write-manifest", "report"]
    assert result["kept_parts"] == 0 and len(result["regenerated_parts"]) == 8
    assert (out / "manifest.json").is_file() and (out / "validation" / "report.html").is_file()

    failing = _Recording(fail_at="write-manifest")
    with pytest.raises(OSError, match="injected failure"):
        run_quarter(cfg, tmp_path / "broken", executor=failing)
    assert failing.calls[-1] == "write-manifest"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run", "small.toml"]  # no staging folder, no lock


def test_the_flow_module_has_no_second_copy_of_the_run():
    tree = ast.parse((REPO / "pipeline" / "flows.py").read_text(encoding="utf-8"))
    names = {n.id for n in ast.walk(tree) if isinstance(n, ast.Name)} | {
        a.name for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) for a in n.names}
    run_internals = {"acquire_lock", "release_lock", "prepare_staging", "publish_staging", "record_part",
                     "discard_staging", "plan_run", "generate_part", "write_run_manifest"}
    assert not names & run_internals, sorted(names & run_internals)
    assert "run_quarter" in names
