"""Shared fixtures. Flow tests share one Prefect test harness per session (about 10 s to start)."""

from __future__ import annotations

import copy
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "scenario_configs" / "demo.toml"
DEMO_TYPED = REPO / "scenario_configs" / "demo_typed.toml"


def run_digests(run_dir: Path) -> dict[str, str]:
    """sha256 of every file of a run except the manifest (it records the creation time) and the
    derived views (the report shows it too)."""
    import hashlib

    from pqflow.storage.manifest import DERIVED_VIEWS

    return {
        p.relative_to(run_dir).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(run_dir.rglob("*"))
        if p.is_file() and p.name != "manifest.json" and p.relative_to(run_dir).as_posix() not in DERIVED_VIEWS
    }


@pytest.fixture(scope="session")
def demo_config_dict() -> dict[str, Any]:
    with open(DEMO_TYPED, "rb") as fh:
        return tomllib.load(fh)


def write_toml(path: Path, data: dict[str, Any]) -> Path:
    """Write a configuration dict as TOML: tables, sub-tables (nested dicts, or keys already
    dotted like ``"calibration.hull_white"``) and arrays of tables (lists of dicts)."""

    def value(v: Any) -> str:
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
        if isinstance(v, list):
            return "[" + ", ".join(value(x) for x in v) + "]"
        return str(v) if not hasattr(v, "isoformat") else v.isoformat()

    def is_tables(v: Any) -> bool:
        return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)

    lines: list[str] = []

    def table(name: str, body: dict[str, Any], header: str) -> None:
        lines.append(header)
        for key, v in body.items():
            if not isinstance(v, dict) and not is_tables(v):
                lines.append(f"{key} = {value(v)}")
        lines.append("")
        for key, v in body.items():
            if isinstance(v, dict):
                table(f"{name}.{key}", v, f"[{name}.{key}]")
            elif is_tables(v):
                for item in v:
                    table(f"{name}.{key}", item, f"[[{name}.{key}]]")

    for section, body in data.items():
        if is_tables(body):
            for item in body:
                table(section, item, f"[[{section}]]")
        else:
            table(section, body, f"[{section}]")
    path.write_text("\n".join(lines), encoding="utf-8")
    return path


@pytest.fixture
def small_config(tmp_path: Path, demo_config_dict: dict[str, Any]):
    """Factory: the demo configuration made small (and optionally edited), written to a file."""

    def make(name: str = "small.toml", **edits: dict[str, Any]) -> Path:
        data = copy.deepcopy(demo_config_dict)
        data["simulation"].update({"scenarios": 400, "batch_size": 100, "horizon_years": 20})
        data["real_world"]["target_year"] = 20
        for section, body in edits.items():
            data.setdefault(section, {}).update(body)
        return write_toml(tmp_path / name, data)

    return make


@pytest.fixture(scope="session")
def prefect_harness():
    from prefect.testing.utilities import prefect_test_harness

    import pqflow.pipeline  # noqa: F401  (sets quiet Prefect defaults before the harness starts)

    with prefect_test_harness(server_startup_timeout=90):
        yield


def assert_gaussian_moments(sample: np.ndarray, mean: np.ndarray, cov: np.ndarray) -> None:
    """Sample mean and covariance of ``sample`` ``(n, d)`` within 4 standard errors of the exact
    Gaussian ``mean`` and ``cov`` (the SE of a sample covariance of Gaussian data:
    ``sqrt((S_ii S_jj + S_ij^2) / n)``, Anderson, An Introduction to Multivariate Statistical
    Analysis, from memory)."""
    n = sample.shape[0]
    se_mean = np.sqrt(np.diag(cov) / n)
    assert np.all(np.abs(sample.mean(axis=0) - mean) < 4.0 * se_mean)  # 4 standard errors
    sample_cov = np.cov(sample, rowvar=False)
    d = np.sqrt(np.diag(cov))
    se_cov = np.sqrt((np.outer(d, d) ** 2 + cov**2) / n)
    assert np.all(np.abs(sample_cov - cov) < 4.0 * se_cov)  # 4 standard errors


def mean_within_se(sample: np.ndarray, target: np.ndarray, n_se: float = 4.0) -> bool:
    """Column means of ``sample`` ``(n, k)`` within ``n_se`` standard errors of ``target``."""
    n = sample.shape[0]
    se = sample.std(axis=0, ddof=1) / np.sqrt(n)
    return bool(np.all(np.abs(sample.mean(axis=0) - target) < n_se * se))


# -- measured sizes and powers, printed at the end of every test run -----------------------------

STATISTICS_KEY = pytest.StashKey[list]()


@pytest.fixture
def report_statistic(request):
    """``report_statistic(line)``: a measured size or power, printed in the terminal summary of
    the run (so a plain ``make test`` shows it) and returned for use in an assertion message."""
    lines = request.config.stash.setdefault(STATISTICS_KEY, [])

    def add(line: str) -> str:
        lines.append(f"{request.node.name}: {line}")
        return line

    return add


def pytest_terminal_summary(terminalreporter, exitstatus, config):
    lines = config.stash.get(STATISTICS_KEY, [])
    if lines:
        terminalreporter.section("measured sizes and powers of the verdict rules")
        for line in lines:
            terminalreporter.write_line(line)
