"""storage/ owns every file format: nothing outside it spells a column name, a Parquet metadata
key or a top-level key of ``calibration.json``.

The check reads the source of every module of ``src/pqflow`` outside ``storage/`` with
:mod:`ast` (docstrings are skipped: prose may name a column) and fails on

* a string literal equal to a Parquet metadata key (``pqflow.measure`` ...) or to a density
  column (``q_density``, ``p_density``) or to the calibration file's name;
* an f-string that builds a column name from its prefix (``f"zcb_{m:g}y"``, ``f"equity_{name}"``,
  ``f"q_density_{block}"`` ...): the naming functions of ``pqflow.storage.names`` do that;
* a subscript or ``.get`` of a top-level key only ``calibration.json`` has (``parameters``,
  ``instruments``, ``expected_short_rate``, ``inputs_sha256``, ``format_version``): readers use
  ``pqflow.storage.calibration_file.CalibrationRecord``;
* a subscript or ``.get`` of a key of the file's credit, Heston, driver-correlation or fit
  sections (``ratings``, ``cir``, ``prices_of_risk``, ``drivers``, ``rmse_bp``,
  ``feller_ratio`` ...): readers use the typed records of
  ``pqflow.storage.calibration_sections`` (``record.credit.ratings``, ``record.heston_fits``
  ...), the real-world side (``house_view``): ``record.expected_short_rate``,
  ``record.real_world_view``; and a string subscript or ``.get`` directly on a record's section
  attribute (``record.credit["ratings"]``, ``record.parameters.get("credit")``,
  ``record.market_prices_of_risk.get("rates")``, ``record.instruments.get("swaptions")``), or
  the swaptions and index options read as dicts (``record.instrument_list("swaptions")``):
  readers use ``record.swaptions`` and ``record.equity_options``.
* a subscript or ``.get`` of a key only the run's other JSON files have (``validation/summary.json``:
  ``counts_toward_verdict``, ``inconclusive_from_time``, ``at_horizon``, ``house_view_fit`` ...;
  ``manifest.json``: ``root_seed``, ``config_sha256`` ...; ``valuation/summary.json``:
  ``inconclusive_lines``, ``change_se_independent`` ...): readers use the records of
  ``pqflow.storage.validation_summary``, ``pqflow.storage.manifest`` and
  ``pqflow.storage.valuation_summary``. Writing such a key
  (a subscript on the left of ``=``) is the builder's and is not flagged.

Common practice (a single owner per format, enforced by a source scan) rather than a published
source. Each check below is shown to fire on a planted line, so the scan cannot pass vacuously.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from pqflow.storage import names
from pqflow.storage.calibration_file import CALIBRATION_FILE

__all__: list[str] = []

SRC = Path(__file__).resolve().parents[1] / "src" / "pqflow"

META_KEYS = frozenset(v for k, v in vars(names).items() if k.startswith("META_"))
EXACT = META_KEYS | frozenset(names.DENSITY_COLUMN.values()) | {CALIBRATION_FILE}
COLUMN_PREFIXES = (
    "zcb_", "real_zcb_", "equity_", "property_", "variance_", "intensity_", "cumulative_intensity_", "dzcb_",
    "spread_", "q_density_", "p_density_",
)
CALIBRATION_KEYS = frozenset({"parameters", "instruments", "expected_short_rate", "inputs_sha256", "format_version"})
#: keys of the nested sections of calibration.json that storage/calibration_sections.py types
#: (credit, Heston indices, driver correlation, the fit records of curve, rates, credit, Heston
#: and correlation); distinctive enough that no other format this package reads spells them
SECTION_KEYS = frozenset({
    # parameters.credit
    "ratings", "cir", "hazard", "hazards", "recovery", "bond_maturities", "substeps_per_year",
    # parameters.stochastic_volatility
    "stochastic_volatility", "prices_of_risk", "kappa_real_world", "theta_real_world", "loadings", "explained",
    "rates_correlation",
    # parameters.driver_correlation
    "driver_correlation", "drivers", "matrix",
    # fit.curve, fit.hull_white / fit.g2pp, fit.credit, fit.heston, fit.correlation
    "rmse_bp", "max_abs_error_bp", "min_shift", "max_shift", "feller_ratio",
    "real_world_long_run_mean", "market_consistent_long_run_mean", "market_spread", "rmse_vol_points",
    "max_abs_vol_points", "at_bounds", "vol_points", "repaired", "frobenius_distance", "gap_to_omega_bp",
    "llfr_terms", "alpha_floor", "alpha_source", "forward_at_convergence", "max_repricing_error",
    # expected_short_rate.target
    "house_view",
})
# not listed although the sections hold them: "credit" (compare's group of the same name),
# "convergence_point" (the report's curve facts), "vol_difference_bp" (a column of the
# market-consistency table), "last_liquid_forward_rate" and "first_smoothing_point" (also keys
# of the stored curve that market/serialize.py owns), "target_maturity" (also a key of the
# real-world view the calibration builds from the configuration and writes)
#: attributes of CalibrationRecord holding a section: a string key read directly on them is a
#: raw read of the file's form
SECTION_ATTRIBUTES = frozenset({"parameters", "fit", "credit", "stochastic_volatility", "driver_correlation",
                                "expected_short_rate", "real_world_view", "market_prices_of_risk", "instruments"})
#: the instrument lists storage/calibration_sections.py types (``record.swaptions``,
#: ``record.equity_options``); a part kind's own list (``inflation_caps``) is its kind's content
TYPED_INSTRUMENTS = frozenset({"swaptions", "equity_options"})

#: keys only the run's JSON files besides calibration.json use (validation/summary.json, manifest.json);
#: generic keys such as "verdict", "cells" or "name" are left out: other dicts use them too
RUN_FILE_KEYS = frozenset({
    # validation/summary.json, a check's entry
    "counts_toward_verdict", "inconclusive_from_time", "inconclusive_cells", "family_critical_z",
    "ess_warning_share", "power_rule", "expected_outside_95_by_chance", "expected_outside_99_by_chance",
    "ess_below_warning_from_time", "density_budget", "wealth_ratio_benchmark",
    # validation/summary.json, check-specific fields the report reads (CheckSummary's named properties)
    "worst_cell", "min_ess_share", "at_horizon", "not_testable", "house_view_fit",
    # valuation/summary.json, its reconciliation and sensitivity totals
    "inconclusive_lines", "material_share", "worst_line", "max_abs_difference_in_se", "change_se_independent",
    # manifest.json, its header
    "root_seed", "config_sha256", "created_utc", "output_times", "revalidated_utc", "run_name", "pqflow_version",
})

#: Files outside storage/ allowed to keep a spelled format, each with its reason.
ALLOWED: dict[str, str] = {
    # the Prefect deployment's own "parameters" (flow arguments), not the calibration file's
    "cli.py::deploy": "Prefect deployment description",
    # the configuration's [credit] table as a TOML dict (its ratings' spreads shifted), not
    # calibration.json's credit part
    "sensitivities/shocks.py::shocked_config": "the configuration's own [credit] ratings",
}


def _docstrings(tree: ast.AST) -> set[int]:
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)) and node.body:
            first = node.body[0]
            value = first.value if isinstance(first, ast.Expr) else None
            if isinstance(value, ast.Constant) and isinstance(value.value, str):
                out.add(id(value))
    return out


def _enclosing_functions(tree: ast.AST) -> dict[int, str]:
    where: dict[int, str] = {}
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            for sub in ast.walk(node):
                where.setdefault(id(sub), node.name)
    return where


def violations(source: str, rel: str) -> list[str]:
    """Every spelled format in ``source`` (a module at ``rel`` under src/pqflow)."""
    tree = ast.parse(source)
    skip = _docstrings(tree)
    inside = _enclosing_functions(tree)
    found = []

    def allowed(node: ast.AST) -> bool:
        return rel in ALLOWED or f"{rel}::{inside.get(id(node), '')}" in ALLOWED

    joined_parts = {id(v) for n in ast.walk(tree) if isinstance(n, ast.JoinedStr) for v in n.values}
    for node in ast.walk(tree):
        if allowed(node):
            continue
        if isinstance(node, ast.Constant) and isinstance(node.value, str) and id(node) not in skip:
            if id(node) not in joined_parts and node.value in EXACT:
                found.append(f"{rel}:{node.lineno}: literal {node.value!r}")
        elif isinstance(node, ast.JoinedStr) and len(node.values) >= 2:
            head, nxt = node.values[0], node.values[1]
            if (isinstance(head, ast.Constant) and isinstance(head.value, str) and isinstance(nxt, ast.FormattedValue)
                    and head.value in COLUMN_PREFIXES):
                found.append(f"{rel}:{node.lineno}: column name built as f\"{head.value}{{...}}\"")
        elif isinstance(node, ast.Subscript) and not isinstance(node.ctx, ast.Store):  # writing a summary entry
            key = node.slice
            if isinstance(key, ast.Constant) and key.value in CALIBRATION_KEYS:
                found.append(f"{rel}:{node.lineno}: calibration.json key [{key.value!r}]")
            elif isinstance(key, ast.Constant) and key.value in SECTION_KEYS:
                found.append(f"{rel}:{node.lineno}: calibration.json section key [{key.value!r}]")
            elif isinstance(key, ast.Constant) and isinstance(key.value, str) and _on_section(node.value):
                found.append(f"{rel}:{node.lineno}: string key [{key.value!r}] on a calibration.json section")
            elif isinstance(key, ast.Constant) and key.value in RUN_FILE_KEYS:
                found.append(f"{rel}:{node.lineno}: run file key [{key.value!r}]")
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
              and node.func.attr == "instrument_list" and node.args and isinstance(node.args[0], ast.Constant)
              and node.args[0].value in TYPED_INSTRUMENTS):
            kind = node.args[0].value
            found.append(f"{rel}:{node.lineno}: typed instruments read as dicts: instrument_list({kind!r})")
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr == "get"
              and node.args and isinstance(node.args[0], ast.Constant)):
            key_value = node.args[0].value
            if key_value in CALIBRATION_KEYS:
                found.append(f"{rel}:{node.lineno}: calibration.json key .get({key_value!r})")
            elif key_value in SECTION_KEYS:
                found.append(f"{rel}:{node.lineno}: calibration.json section key .get({key_value!r})")
            elif isinstance(key_value, str) and _on_section(node.func.value):
                found.append(f"{rel}:{node.lineno}: string key .get({key_value!r}) on a calibration.json section")
            elif key_value in RUN_FILE_KEYS:
                found.append(f"{rel}:{node.lineno}: run file key .get({key_value!r})")
    return found


def _on_section(node: ast.AST) -> bool:
    """``x.credit``, ``x.parameters``, ``x.part_fit(...)`` ...: a section of a calibration record."""
    if isinstance(node, ast.Attribute):
        return node.attr in SECTION_ATTRIBUTES
    return isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute) and node.func.attr == "part_fit"


def _modules() -> list[Path]:
    return sorted(p for p in SRC.rglob("*.py") if "storage" not in p.relative_to(SRC).parts[:1])


def test_nothing_outside_storage_spells_a_format():
    found = []
    for path in _modules():
        found += violations(path.read_text(encoding="utf-8"), path.relative_to(SRC).as_posix())
    hint = "formats spelled outside storage/ (use pqflow.storage.names / calibration_file):\n"
    assert not found, hint + "\n".join(found)


def test_every_allowed_entry_still_exists():
    # an allow-list entry for a file or function that is gone would hide nothing but rot
    for entry in ALLOWED:
        rel, _, func = entry.partition("::")
        path = SRC / rel
        assert path.is_file(), entry
        if func:
            assert f"def {func}(" in path.read_text(encoding="utf-8"), entry


@pytest.mark.parametrize("line, what", [
    ('meta = {"pqflow.measure": "real_world"}', "literal 'pqflow.measure'"),
    ('col = "q_density"', "literal 'q_density'"),
    ('path = run / "calibration.json"', "literal 'calibration.json'"),
    ('col = f"zcb_{m:g}y"', 'f"zcb_{...}"'),
    ('col = f"equity_{name}"', 'f"equity_{...}"'),
    ('col = f"p_density_{block}"', 'f"p_density_{...}"'),
    ('curve = cal["parameters"]["curve"]', "key ['parameters']"),
    ('quotes = cal.get("instruments") or {}', "key .get('instruments')"),
    # the typed sections: credit, Heston indices, driver correlation, fit records
    ('ratings = credit["ratings"]', "section key ['ratings']"),
    ('kappa = rating.get("cir")["mean_reversion"]', "section key .get('cir')"),
    ('lam = entry["prices_of_risk"]', "section key ['prices_of_risk']"),
    ('names = dc.get("drivers", [])', "section key .get('drivers')"),
    ('rmse = fit["rmse_bp"]', "section key ['rmse_bp']"),
    ('feller = h.get("feller_ratio")', "section key .get('feller_ratio')"),
    ('d = corr["frobenius_distance"]', "section key ['frobenius_distance']"),
    ('terms = curve["llfr_terms"]', "section key ['llfr_terms']"),
    ('aa = cal.credit["AA"]', "string key ['AA'] on a calibration.json section"),
    ('eq = cal.parameters.get("equity")', "string key .get('equity') on a calibration.json section"),
    ('rows = cal.part_fit("hull_white")["rows"]', "string key ['rows'] on a calibration.json section"),
    # the real-world side: expected short rate, its house-view target, the view, the prices of risk
    ('lam = cal.market_prices_of_risk.get("rates")', "string key .get('rates') on a calibration.json section"),
    ('times = cal.expected_short_rate["time"]', "string key ['time'] on a calibration.json section"),
    ('kind = cal.real_world_view.get("kind")', "string key .get('kind') on a calibration.json section"),
    ('path = target["house_view"]', "section key ['house_view']"),
    ('m = cal.real_world_view["target_maturity"]', "string key ['target_maturity'] on a calibration.json section"),
    # the rates' and indices' calibration instruments
    ('quotes = cal.instrument_list("swaptions")', "instrument_list('swaptions')"),
    ('quotes = cal.instrument_list("equity_options")', "instrument_list('equity_options')"),
    ('quotes = base.instruments.get("swaptions", [])', "string key .get('swaptions') on a calibration.json section"),
    ('opts = cal.instruments["equity_options"]', "string key ['equity_options'] on a calibration.json section"),
    ('counts = c.get("counts_toward_verdict", True)', "run file key .get('counts_toward_verdict')"),
    ('share = summary["checks"]["density_real_world"]["ess_warning_share"]', "run file key ['ess_warning_share']"),
    ('seed = (manifest.get("seeds") or {}).get("root_seed")', "run file key .get('root_seed')"),
    ('want = manifest["config_sha256"]', "run file key ['config_sha256']"),
    ('at = c.extras.get("at_horizon") or {}', "run file key .get('at_horizon')"),
    ('fit = c.entry["house_view_fit"]', "run file key ['house_view_fit']"),
    ('lines = rec.get("inconclusive_lines", [])', "run file key .get('inconclusive_lines')"),
    ('se = be["change_se_independent"]', "run file key ['change_se_independent']"),
])
def test_the_scan_fires_on_a_planted_line(line, what):
    found = violations(f"def f(cal, run, m, name, block):\n    {line}\n", "planted.py")
    assert len(found) == 1 and what in found[0], found


def test_the_scan_leaves_the_builders_writes_alone():
    # the builder writes a summary entry by key; only reads outside storage/ are the readers' business
    source = 'def f(entry, share):\n    entry["ess_warning_share"] = share\n    entry["power_rule"] = "text"\n'
    assert violations(source, "builder.py") == []


def test_the_scan_leaves_unrelated_dicts_and_the_kinds_own_instruments_alone():
    # compare's groups share the instrument lists' names; a part kind reads its own list; the
    # market-consistency table's rows carry prices by key; the real-world view the calibration builds
    source = (
        'def f(cal, out, r, key, kind, view, target):\n'
        '    out["swaptions"][key] = (1.0, "bp")\n'
        '    caps = cal.instrument_list(part_instruments_key(kind)) + cal.instrument_list("inflation_caps")\n'
        '    return r["market_price"], r.get("model_price"), view.get("target_maturity"), target.get("time")\n'
    )
    assert violations(source, "unrelated.py") == []


def test_the_scan_leaves_prose_and_other_strings_alone():
    source = (
        'def f(x):\n'
        '    """Reads q_density and f"zcb_{m}y" from calibration.json["parameters"]."""\n'
        '    return f"the q_density column of {x}", x["name"], x.get("fit")\n'
    )
    assert violations(source, "prose.py") == []


LOW_LAYERS = ("config", "market", "models", "measure")


def test_the_low_layers_import_only_the_names_from_storage():
    # DEVELOPERS.md: config, market, models and measure may import pqflow.storage.names only
    found = []
    for layer in LOW_LAYERS:
        for path in sorted((SRC / layer).rglob("*.py")):
            for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
                if isinstance(node, ast.ImportFrom) and (node.module or "").startswith("pqflow.storage"):
                    if node.module != "pqflow.storage.names":
                        found.append(f"{path.relative_to(SRC)}:{node.lineno}: from {node.module}")
    assert not found, found


def test_the_names_module_needs_no_pyarrow():
    # the names are importable by every layer without the file machinery
    import subprocess
    import sys

    code = "import sys, pqflow.storage.names; print('pyarrow' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
