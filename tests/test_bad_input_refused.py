"""Bad input that used to slip through is refused up front: exit 2, one ``error:`` line naming
the file and the key or row, no traceback, nothing written.

Sources: the TOML 1.0 specification (``nan`` and ``inf`` are valid TOML floats, a quoted value
is a string) and common practice for quote ranges (stated beside the check)."""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pytest
from cli_helpers import assert_clean_error, invoke
from conftest import REPO

CONFIGS = REPO / "scenario_configs"


def edited(tmp_path: Path, source: str, edits: dict[str, str], name: str = "edited.toml") -> Path:
    """``scenario_configs/source`` with each regex (one line, multiline mode) replaced, written
    beside a copy of the demo market data so that relative paths still resolve."""
    if not (tmp_path / "market_data").exists():
        shutil.copytree(CONFIGS / "market_data", tmp_path / "market_data")
    text = (CONFIGS / source).read_text(encoding="utf-8")
    for pattern, replacement in edits.items():
        text, n = re.subn(pattern, replacement, text, count=1, flags=re.MULTILINE)
        assert n == 1, pattern
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def refused_before_work(tmp_path: Path, config: Path, *needles: str, extra: tuple[str, ...] = ()) -> str:
    out = tmp_path / "never"
    line = assert_clean_error(invoke("run", config, "--out", out, *extra), 2, *needles)
    assert not out.exists() and not list(tmp_path.glob(".never*"))  # no run, staging or lock
    return line


# ---------------------------------------------------------------------- 1. NaN and infinity

@pytest.mark.parametrize(
    "source, pattern, replacement, key",
    [
        ("demo_typed.toml", r"^bond_maturities = \[1,", "bond_maturities = [nan,", "outputs.bond_maturities[0]"),
        ("demo_typed.toml", r"^values = \[0.0215, 0.0228, 0.0239", "values = [0.0215, 0.0228, nan", "curve.values[2]"),
        ("demo_typed.toml", r"^maturities = \[1, 2, 3,", "maturities = [1, 2, inf,", "curve.maturities[2]"),
        ("demo.toml", r"^real_bond_maturities = \[5,", "real_bond_maturities = [nan,",
         "inflation.real_bond_maturities[0]"),
        ("demo_g2pp.toml", r"^fixed = \{ rho = -0.7 \}", "fixed = { rho = nan }", "calibration.g2pp.fixed.rho"),
        ("demo_typed.toml", r"^volatility = 0.0090", "volatility = -inf", "hull_white.volatility"),
    ],
)
def test_nan_and_infinity_in_the_configuration_are_refused(tmp_path, source, pattern, replacement, key):
    # TOML 1.0 reads nan and inf as floats; pqflow must not simulate with them.
    cfg = edited(tmp_path, source, {pattern: replacement})
    refused_before_work(tmp_path, cfg, str(cfg), key, "finite")


def test_nan_in_a_stored_calibration_is_refused(tmp_path):
    cfg = CONFIGS / "demo_typed.toml"
    stored = tmp_path / "calibration.json"
    assert invoke("calibrate", cfg, "--out", stored).exit_code == 0
    data = json.loads(stored.read_text())
    data["parameters"]["hull_white"]["volatility"] = float("nan")
    stored.write_text(json.dumps(data))  # Python writes the JSON extension NaN
    refused_before_work(tmp_path, cfg, str(stored), "parameters.hull_white.volatility", "finite",
                        extra=("--calibration", str(stored)))


def test_nan_in_a_market_data_file_names_file_row_and_column(tmp_path):
    cfg = edited(tmp_path, "demo.toml", {})
    quotes = tmp_path / "market_data" / "veldmark_2026q3" / "swaptions.csv"
    lines = quotes.read_text().splitlines()
    lines[3] = re.sub(r",[0-9.]+,1$", ",nan,1", lines[3])
    quotes.write_text("\n".join(lines) + "\n")
    refused_before_work(tmp_path, cfg, "swaptions.csv", "data row 3", "normal_vol_bp")


# ------------------------------------------------------------------------- 2. wrong types

@pytest.mark.parametrize(
    "pattern, replacement, key",
    [
        (r"^scenarios = 2000", 'scenarios = "2000"', "simulation.scenarios"),
        (r"^antithetic = true", 'antithetic = "yes"', "simulation.antithetic"),
        (r"^steps_per_year = 1", "steps_per_year = true", "simulation.steps_per_year"),
        (r"^seed = 20260930", "seed = 2.6e7", "simulation.seed"),
        (r"^mean_reversion = 0.05", 'mean_reversion = "0.05"', "hull_white.mean_reversion"),
    ],
)
def test_wrong_types_are_refused_not_converted(tmp_path, pattern, replacement, key):
    # A quoted number is a TOML string, true a boolean, 2.6e7 a float (TOML 1.0): none is an integer.
    cfg = edited(tmp_path, "demo_typed.toml", {pattern: replacement})
    refused_before_work(tmp_path, cfg, str(cfg), key)


def test_dates_may_be_written_as_iso_text(tmp_path):
    cfg = edited(tmp_path, "demo_typed.toml", {r"^valuation_date = 2026-09-30": 'valuation_date = "2026-09-30"'})
    assert invoke("check", cfg).exit_code == 0


@pytest.mark.parametrize("n", [2, 10, 18])
def test_too_few_scenarios_are_refused_with_the_rule(tmp_path, n):
    line = refused_before_work(tmp_path, CONFIGS / "demo_typed.toml", "simulation", f"scenarios = {n}",
                               "at least 20", extra=("--scenarios", str(n)))
    assert "command-line" in line


def test_twenty_scenarios_pass_the_rule(tmp_path):
    from pqflow.config.loader import apply_overrides, load_config

    cfg = load_config(CONFIGS / "demo_typed.toml")
    assert apply_overrides(cfg, scenarios=20, source="x").simulation.scenarios == 20


# ---------------------------------------------------------------- 3. implausible quotes

@pytest.mark.parametrize("vol, accepted", [("1000000", False), ("1000.5", False), ("1000", True), ("250", True)])
def test_swaption_quotes_outside_the_plausible_range_name_file_and_row(tmp_path, vol, accepted):
    # Range 1 to 1,000 bp for normal vols: common practice (quoted normal swaption vols of major
    # currencies lie far inside it); above it the quote is a typo or in the wrong unit.
    from pqflow.market.data_files import MAX_NORMAL_VOL_BP, read_swaption_quotes

    assert MAX_NORMAL_VOL_BP == 1000.0
    cfg = edited(tmp_path, "demo.toml", {})
    quotes = tmp_path / "market_data" / "veldmark_2026q3" / "swaptions.csv"
    lines = quotes.read_text().splitlines()
    lines[2] = re.sub(r",[0-9.]+,1$", f",{vol},1", lines[2])
    quotes.write_text("\n".join(lines) + "\n")
    if accepted:
        assert len(read_swaption_quotes(quotes)) == len(lines) - 1
        return
    # `check` used to call the file valid, and `run` blamed equity_vols.csv.
    line = assert_clean_error(invoke("check", cfg), 2, "swaptions.csv", "data row 2", "normal_vol_bp", "1,000 bp")
    assert "equity_vols" not in line
    refused_before_work(tmp_path, cfg, "swaptions.csv", "data row 2")


# ---------------------------------------------------------- 14. text printed literally

def test_square_brackets_in_messages_and_paths_are_printed_literally(tmp_path):
    # The equity-name rule ^[a-z][a-z0-9_]*$ used to lose its brackets to the terminal's markup.
    cfg = edited(tmp_path, "demo_typed.toml", {r'^name = "veldmark_all_share"': 'name = "Bad-Name"'})
    assert "^[a-z][a-z0-9_]*$" in refused_before_work(tmp_path, cfg, "equity.name")
    # Both forms at once ([correlations] is a table name in the message).
    cfg = edited(tmp_path, "demo_typed.toml", {
        r"^correlation_with_rates = -0.15": "correlation_with_rates = -0.15\n[correlations]\n"
                                            "drivers = [\"rates\", \"veldmark_all_share\"]\n"
                                            "matrix = [[1.0, -0.15], [-0.15, 1.0]]",
    }, name="both.toml")
    assert "[correlations]" in refused_before_work(tmp_path, cfg, "equity.correlation_with_rates")
    # A closing tag in a path crashed the terminal library; now it is part of the message.
    odd = tmp_path / "[/x] [bold]q3"
    odd.mkdir(parents=True)
    cfg = edited(odd, "demo_typed.toml", {r"^scenarios = 2000": 'scenarios = "x"'})
    assert str(cfg) in refused_before_work(odd, cfg, "simulation.scenarios")


def test_valid_run_prints_bracketed_paths_literally(tmp_path):
    odd = tmp_path / "[/x] q3"
    odd.mkdir(parents=True)
    cfg = edited(odd, "demo_typed.toml", {})
    result = invoke("check", cfg)
    assert result.exit_code == 0, result.output
    assert f"{cfg}: valid" in result.output.replace("\n", "")


# --------------------------------------------------------------- 16. cross-field errors

def test_cross_field_errors_name_the_keys_not_the_whole_configuration(tmp_path):
    cfg = edited(tmp_path, "demo_typed.toml", {r"^horizon_years = 50": "horizon_years = 150"})
    line = refused_before_work(tmp_path, cfg, "simulation.horizon_years", "curve.maturities")
    assert len(line) < 400 and "'run':" not in line and "Larkspur" not in line
