"""Bad run configurations stop before any simulation with a message naming the file and key."""

from __future__ import annotations

import copy

import pytest

from pqflow.calibration import assemble_calibration
from pqflow.config import load_config, parse_config
from pqflow.errors import ConfigError, MeasureError


def _edit(base, section, key, value):
    data = copy.deepcopy(base)
    if value is _DELETE:
        del data[section][key]
    else:
        data[section][key] = value
    return data


_DELETE = object()


def test_demo_configuration_is_valid(demo_config_dict):
    cfg = parse_config(demo_config_dict, source="demo.toml")
    assert cfg.simulation.n_steps == 50


@pytest.mark.parametrize(
    ("section", "key", "value", "fragment"),
    [
        ("hull_white", "volatilty", 0.01, "hull_white.volatilty: unknown key"),
        ("hull_white", "volatility", _DELETE, "hull_white.volatility: missing key"),
        ("hull_white", "volatility", -0.01, "hull_white.volatility: Input should be greater than 0"),
        ("hull_white", "mean_reversion", "fast", "hull_white.mean_reversion: Input should be a valid number"),
        ("equity", "correlation_with_rates", 1.5, "equity.correlation_with_rates"),
        ("equity", "correlation_with_rates", -1.0, "strictly inside (-1, 1)"),
        ("equity", "volatility", -0.2, "equity.volatility"),
        ("simulation", "horizon_years", 90, "needs the curve to 120 years, but curve.maturities ends at 100"),
        ("simulation", "scenarios", 2001, "must be even"),
        ("simulation", "batch_size", 0, "simulation.batch_size"),
        ("simulation", "steps_per_year", 2.5, "simulation.steps_per_year"),
        ("curve", "values", [0.02, 0.03], "maturities has 16 entries but values has 2"),
        ("curve", "maturities", [1, 2, 2, 5, 7, 10, 12, 15, 20, 25, 30, 40, 50, 60, 80, 100], "strictly increasing"),
        ("curve", "kind", "par_rates", "curve.kind"),
        ("outputs", "bond_maturities", [10, 10], "must not repeat"),
        ("real_world", "rates_market_price_of_risk", 0.1, "give exactly one of"),
    ],
)
def test_bad_configuration_names_file_and_key(demo_config_dict, section, key, value, fragment):
    data = _edit(demo_config_dict, section, key, value)
    with pytest.raises(ConfigError) as info:
        parse_config(data, source="quarter.toml")
    message = str(info.value)
    assert "quarter.toml" in message
    assert fragment in message


def test_unknown_section_is_refused(demo_config_dict):
    data = copy.deepcopy(demo_config_dict)
    data["stochastic_mortality"] = {"rate": 0.02}
    with pytest.raises(ConfigError, match="stochastic_mortality: unknown key"):
        parse_config(data, source="q.toml")


def test_missing_file_and_bad_toml(tmp_path):
    with pytest.raises(ConfigError, match="not found"):
        load_config(tmp_path / "absent.toml")
    bad = tmp_path / "bad.toml"
    bad.write_text("[run\nname = 1\n")
    with pytest.raises(ConfigError, match="bad.toml: not valid TOML"):
        load_config(bad)


def test_different_real_world_volatility_is_refused(demo_config_dict):
    # Girsanov's theorem changes drifts only; measures with different diffusion coefficients are
    # mutually singular (common practice; e.g. Shreve, Stochastic Calculus for Finance II, ch. 5).
    data = _edit(demo_config_dict, "real_world", "equity_volatility", 0.25)
    cfg = parse_config(data, source="q.toml")
    with pytest.raises(MeasureError, match="singular"):
        assemble_calibration(cfg)
    same = _edit(demo_config_dict, "real_world", "rates_volatility", demo_config_dict["hull_white"]["volatility"])
    assemble_calibration(parse_config(same, source="q.toml"))  # equal volatilities are fine
