"""What the installed distribution puts into a user's environment: one top-level name, ``pqflow``.

The Prefect flows live in the repository's top folder ``pipeline/`` and install as
``pqflow.pipeline``; a generic top-level module named ``pipeline`` would shadow, or be shadowed
by, any other project's module of that name (common practice: a distribution installs only
its own import name; the packaging guide's "top_level.txt" records it).
"""

from __future__ import annotations

import tomllib
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def _setuptools_config() -> dict:
    return tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))["tool"]["setuptools"]


def _installed(code: str, tmp_path: Path) -> str:
    """Run ``code`` in a fresh interpreter from an empty folder, so that neither the repository's
    top folder nor a stale build record in it is on ``sys.path``: only the installation counts."""
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-c", code], cwd=tmp_path, capture_output=True, text=True, timeout=120,
                         env={"PATH": "/usr/bin:/bin", "PREFECT_HOME": str(tmp_path / "prefect")})
    assert out.returncode == 0, out.stderr
    return out.stdout


def test_the_installed_distribution_adds_only_the_name_pqflow(tmp_path):
    code = ("import importlib.metadata as m, pathlib; d = m.distribution('pqflow'); "
            "print((d.read_text('top_level.txt') or '').split()); "
            "print(sorted({pathlib.Path(str(f)).parts[0] for f in d.files or []}))")
    top_level, tops = (eval(line) for line in _installed(code, tmp_path).splitlines())
    assert top_level == ["pqflow"], top_level
    # Every installed file is pqflow's own, its metadata, its command, or (editable install)
    # setuptools' path hook for it: nothing named pipeline at the top.
    assert "pipeline" not in tops and "pipeline.py" not in tops, tops
    for top in tops:
        assert top in ("pqflow", "..", "__pycache__") or top.startswith(("pqflow-", "__editable__")), top


def test_the_flows_import_as_pqflow_pipeline_and_pipeline_is_not_importable_from_the_install(tmp_path):
    code = ("import importlib.util, pqflow.pipeline.flows as f; "
            "print(importlib.util.find_spec('pipeline') is None, f.run_in_process.__module__)")
    assert _installed(code, tmp_path).split() == ["True", "pqflow.pipeline.flows"]


def test_every_package_folder_is_listed_and_maps_under_pqflow():
    cfg = _setuptools_config()
    packages, package_dir = cfg["packages"], cfg["package-dir"]
    assert all(p == "pqflow" or p.startswith("pqflow.") for p in packages), packages
    assert package_dir == {"": "src", "pqflow.pipeline": "pipeline"}
    on_disk = {"pqflow"} | {
        "pqflow." + ".".join(d.relative_to(REPO / "src" / "pqflow").parts)
        for d in (REPO / "src" / "pqflow").rglob("*") if d.is_dir() and any(d.glob("*.py"))
    }
    on_disk |= {"pqflow.pipeline." + ".".join(d.relative_to(REPO / "pipeline").parts)
                for d in (REPO / "pipeline").rglob("*") if d.is_dir() and any(d.glob("*.py"))}
    on_disk.add("pqflow.pipeline")
    assert sorted(on_disk) == sorted(packages), "list every package folder in pyproject.toml [tool.setuptools] packages"
