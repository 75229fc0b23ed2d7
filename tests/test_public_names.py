"""The public names of pqflow and of the flows package are pinned here.

Common practice (the Python tutorial, "Importing * From a Package"; PEP 8, "Public and internal
interfaces"): a module's public interface is its ``__all__``. Every module of ``pqflow`` and of
``pipeline`` declares one, every name in it exists, and each package's own ``__all__`` equals the
list written below, so that removing or renaming a public name is a conscious change to this file.

To regenerate the pinned lists after a deliberate change, print them with

    .venv/bin/python tests/test_public_names.py

and paste the result over ``PINNED``.
"""

from __future__ import annotations

import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
TREES = {"pqflow": ROOT / "src" / "pqflow", "pipeline": ROOT / "pipeline"}

# package -> its __init__'s __all__ (sorted); None: a namespace package (a folder without __init__.py)
PINNED: dict[str, list[str] | None] = {
    "pipeline": ["quarterly_run", "run_in_process", "run_quarterly"],
    "pqflow": ["CAUTION", "__version__"],
    "pqflow.calibration": ["Calibration", "assemble_calibration", "build_model", "load_calibration"],
    "pqflow.config": ["RunConfig", "apply_overrides", "config_hash", "load_config", "parse_config"],
    "pqflow.jobs": [
        "PartRecord", "RunPlan", "calibrate_step", "generate_part", "plan_run", "validate_staged_run",
        "write_calibration", "write_run_manifest",
    ],
    "pqflow.liabilities": [
        "DeferredAnnuityGAO", "GompertzMakeham", "LiabilityDataError", "PRODUCTS", "Participating", "Portfolio",
        "QUANTITIES", "RunInfo", "SetValuation", "UnitLinkedGMMB", "cash_flow_frame", "check_portfolio_against_run",
        "inspect_run", "load_portfolio", "parse_portfolio", "publish_valuation", "results_frame",
        "valuation_summary", "valuation_table_rows", "value_liabilities_cli", "value_run",
    ],
    "pqflow.market": ["DiscountCurve", "LogDiscountCurve"],
    "pqflow.measure": [
        "PricesOfRisk", "density_coefficients", "equity_price_of_risk", "expected_short_rate",
        "log_density_increments", "rates_price_of_risk_for_target",
    ],
    "pqflow.models": None,
    "pqflow.report": [
        "Comparison", "build_report_html", "compare_runs", "comparison_json", "summary_lines", "write_compare_html",
        "write_report",
    ],
    "pqflow.sensitivities": [],
    "pqflow.simulation": [
        "Batch", "MEASURES", "Workspace", "batch_generator", "batch_seed_sequence", "plan_batches",
        "simulate_batch", "simulate_states", "time_grid",
    ],
    "pqflow.storage": [
        "OutputTarget", "batch_table", "build_manifest", "discard_staging", "export_slice", "file_sha256",
        "iter_parts", "part_name", "part_paths", "prepare_staging", "publish_staging", "read_json", "read_part",
        "resolve_target", "run_lock", "verify_run", "verify_target", "write_json_atomic", "write_part",
    ],
    "pqflow.validation": [
        "CheckResult", "Moments", "RunInputs", "RunValidation", "density_table",
        "load_run_inputs", "market_consistency_check", "martingale_table", "overall_verdict", "real_world_check",
        "reconciliation_check", "run_checks", "summarise", "validate_run", "wealth_ratio_benchmark",
    ],
}


def _module_names() -> list[str]:
    """Every module of the two trees, found from the files (namespace packages included)."""
    names = []
    for top, folder in TREES.items():
        for f in sorted(folder.rglob("*.py")):
            rel = f.relative_to(folder).with_suffix("").parts
            if rel[-1] == "__init__":
                rel = rel[:-1]
            names.append(".".join((top, *rel)))
    return names


def _package_names() -> list[str]:
    return sorted({top for top in TREES} | {
        ".".join((top, *d.relative_to(folder).parts))
        for top, folder in TREES.items() for d in folder.rglob("*") if d.is_dir() and any(d.glob("*.py"))
    })


def current_package_names() -> dict[str, list[str] | None]:
    """What ``PINNED`` should say for the tree as it is (to regenerate the pinned lists)."""
    out: dict[str, list[str] | None] = {}
    for name in _package_names():
        mod = importlib.import_module(name)
        init = getattr(mod, "__file__", None)
        out[name] = None if init is None else sorted(getattr(mod, "__all__", ["<no __all__>"]))
    return out


@pytest.mark.parametrize("name", _module_names())
def test_every_module_declares_all_and_each_name_resolves(name: str) -> None:
    mod = importlib.import_module(name)
    assert hasattr(mod, "__all__"), f"{name} has no __all__"
    names = list(mod.__all__)
    assert all(isinstance(n, str) for n in names), f"{name}.__all__ holds a non-string"
    assert len(set(names)) == len(names), f"{name}.__all__ repeats a name"
    missing = [n for n in names if not hasattr(mod, n)]
    assert not missing, f"{name}.__all__ lists names the module does not define: {missing}"


def test_package_public_names_are_the_pinned_ones() -> None:
    current = current_package_names()
    assert set(current) == set(PINNED), (
        f"packages added {sorted(set(current) - set(PINNED))}, removed {sorted(set(PINNED) - set(current))}: "
        "update PINNED (see the module docstring)"
    )
    changed = {
        k: {"added": sorted(set(current[k] or []) - set(PINNED[k] or [])),
            "removed": sorted(set(PINNED[k] or []) - set(current[k] or [])),
            "namespace": (current[k] is None, PINNED[k] is None)}
        for k in current
        if (current[k] is None) != (PINNED[k] is None) or sorted(current[k] or []) != sorted(PINNED[k] or [])
    }
    assert not changed, f"public names changed (update PINNED if deliberate): {changed}"


def test_the_check_sees_a_removed_name(monkeypatch: pytest.MonkeyPatch) -> None:
    # The pin must be able to fail: drop a name from one package's __all__ and the comparison differs.
    import pqflow.market

    monkeypatch.setattr(pqflow.market, "__all__", ["DiscountCurve"])
    assert current_package_names()["pqflow.market"] != PINNED["pqflow.market"]


if __name__ == "__main__":  # print the current lists, to paste over PINNED
    import pprint

    pprint.pprint(current_package_names(), width=120, compact=True)
