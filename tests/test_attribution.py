"""Step-wise attribution of the liability change between two runs.

References used below:
- Telescoping sums: with V_0 the old inputs and V_n the new, sum_k (V_k - V_{k-1}) = V_n - V_0
  (common practice in analysis of change: the steps add up to the total by construction).
- Common random numbers: two runs from the same seeds differ only through their inputs, so the
  standard error of the paired difference is smaller than sqrt(se_a^2 + se_b^2) when the values
  are positively correlated (Glasserman, Monte Carlo Methods in Financial Engineering, 2003,
  s. 4.2; from memory).
- Reproducibility: the same configuration and seed give the same bytes (the project's rule,
  tests/test_reproducibility.py), so step 0 reproduces the old run and the last step the new one.
"""

from __future__ import annotations

import copy
from pathlib import Path

import pytest
from conftest import REPO, write_toml

from pqflow.config.loader import load_config
from pqflow.report.attribution import step_configs

BOOK = REPO / "scenario_configs" / "demo_liabilities.toml"

__all__: list[str] = []


def _small(demo_config_dict, **edits):
    data = copy.deepcopy(demo_config_dict)
    data["simulation"].update({"scenarios": 100, "batch_size": 50, "horizon_years": 25})
    data["real_world"]["target_year"] = 25
    for section, body in edits.items():
        data[section].update(body)
    return data


def _shifted_curve(data, bp=25):
    out = copy.deepcopy(data)
    out["curve"]["values"] = [v + bp * 1e-4 for v in out["curve"]["values"]]
    return out


def _strip_names(d):
    d = copy.deepcopy(d)
    d["run"].pop("name")
    return d


def test_steps_follow_the_stated_order_and_end_at_the_new_configuration(tmp_path, demo_config_dict):
    old = _small(demo_config_dict)
    new = _shifted_curve(_small(demo_config_dict, real_world={"equity_risk_premium": 0.045},
                                hull_white={"volatility": 0.0095}))
    a = load_config(write_toml(tmp_path / "a.toml", old))
    b = load_config(write_toml(tmp_path / "b.toml", new))
    steps = step_configs(a, b)
    assert [s.name if s else None for s, _ in steps] == [None, "curve", "rate_volatilities", "house_view"]
    # Each step changes only its own group.
    assert steps[1][1]["hull_white"] == steps[0][1]["hull_white"] and steps[1][1]["curve"] != steps[0][1]["curve"]
    assert steps[2][1]["real_world"] == steps[0][1]["real_world"]
    final = _strip_names(steps[-1][1])
    target = _strip_names({k: v for k, v in b.model_dump(mode="json").items()})
    from pqflow.report.attribution import _clean

    assert final == _clean(target)  # the last step is the new configuration itself
    # Nothing changed: the old inputs alone; a curve-only change: one curve step.
    assert [s for s, _ in step_configs(a, a)] == [None]
    c = load_config(write_toml(tmp_path / "c.toml", _shifted_curve(old)))
    assert [s.name if s else None for s, _ in step_configs(a, c)] == [None, "curve"]


@pytest.fixture(scope="module")
def two_quarters(tmp_path_factory, demo_config_dict):
    from pqflow.liabilities import value_liabilities_cli
    from pqflow.pipeline import run_in_process

    root = tmp_path_factory.mktemp("attrib")
    old = _small(demo_config_dict)
    paths = {
        "old": write_toml(root / "old.toml", old),
        "curve": write_toml(root / "curve.toml", _shifted_curve(old)),
        "two": write_toml(root / "two.toml", _shifted_curve(_small(demo_config_dict,
                                                                  real_world={"equity_risk_premium": 0.045}))),
    }
    runs = {}
    for name, cfg in paths.items():
        runs[name] = root / f"run-{name}"
        run_in_process(cfg, runs[name])
        value_liabilities_cli(runs[name], BOOK)
    return root, paths, runs


@pytest.mark.flow
def test_curve_only_change_is_all_curve_and_steps_sum_to_the_total(prefect_harness, two_quarters):
    from pqflow.pipeline.attribution import attribute_change

    root, paths, runs = two_quarters
    res = attribute_change(str(runs["old"]), str(runs["curve"]), str(paths["old"]), str(paths["curve"]),
                           str(BOOK), str(root / "attr-curve"))
    assert [s["name"] for s in res["steps"]] == ["old_inputs", "curve"]
    assert res["checks"] == {"reproduces_old_run": True, "reproduces_new_run": True}
    for line, t in res["totals"].items():
        step = next(r for r in res["rows"] if r["line"] == line)
        assert step["name"] == "curve"
        assert step["best_estimate_change"] == pytest.approx(t["best_estimate_total"], abs=1e-6)  # all of it
        assert t["best_estimate_sum_of_steps"] == pytest.approx(t["best_estimate_total"], abs=1e-6)
        assert t["tvog_sum_of_steps"] == pytest.approx(t["tvog_total"], abs=1e-6)
    total = next(r for r in res["rows"] if r["line"] == "total")
    assert total["paired"] and total["best_estimate_change"] < 0  # +25 bp on the curve lowers the BE
    # Common random numbers: the paired SE is well below the SE of two independent estimates.
    import json

    val = json.loads((runs["old"] / "valuation" / "summary.json").read_text())
    se_old = next(v["market_consistent_se"] for v in val["lines"] if v["name"] == "total"
                  and v["quantity"] == "best_estimate")
    print(f"curve step, total BE: change {total['best_estimate_change']:,.0f}, paired SE "
          f"{total['best_estimate_se']:,.0f}, one run's SE {se_old:,.0f}")
    assert total["best_estimate_se"] < se_old
    # The intermediate runs stay, each with its manifests.
    for step in res["folder"]["steps"]:
        assert (root / "attr-curve" / step / "manifest.json").is_file()
        assert (root / "attr-curve" / step / "valuation" / "manifest.json").is_file()
    assert (root / "attr-curve" / "attribution.csv").is_file()
    # The comparison page shows the waterfall and the steps' table.
    from pqflow.report.compare import compare_runs, write_compare_html

    html = write_compare_html(compare_runs(runs["old"], runs["curve"]), root / "cmp.html",
                              attribution=res).read_text(encoding="utf-8")
    assert 'id="compare-attribution"' in html and "old inputs to new" in html
    assert "1. curve" in html and "reproduces old run: yes" in html


@pytest.mark.flow
def test_two_steps_sum_exactly_and_no_change_attributes_nothing(prefect_harness, two_quarters):
    from pqflow.pipeline.attribution import attribute_change

    root, paths, runs = two_quarters
    res = attribute_change(str(runs["old"]), str(runs["two"]), str(paths["old"]), str(paths["two"]),
                           str(BOOK), str(root / "attr-two"))
    assert [s["name"] for s in res["steps"]] == ["old_inputs", "curve", "house_view"]
    for line, t in res["totals"].items():
        parts = [r["best_estimate_change"] for r in res["rows"] if r["line"] == line]
        assert len(parts) == 2
        assert sum(parts) == pytest.approx(t["best_estimate_total"], abs=1e-6)
        assert t["end_best_estimate"] - t["start_best_estimate"] == pytest.approx(t["best_estimate_total"], abs=1e-9)
    assert res["checks"]["reproduces_new_run"]
    same = attribute_change(str(runs["old"]), str(runs["old"]), str(paths["old"]), str(paths["old"]),
                            str(BOOK), str(root / "attr-none"))
    assert same["rows"] == []
    assert all(t["best_estimate_total"] == 0.0 and t["tvog_total"] == 0.0 for t in same["totals"].values())


def test_attribution_refuses_a_configuration_that_did_not_make_the_run(two_quarters, tmp_path):
    from pqflow.errors import PqflowError
    from pqflow.report.attribution import prepare_attribution

    root, paths, runs = two_quarters
    with pytest.raises(PqflowError, match="did not make run"):
        prepare_attribution(runs["old"], runs["curve"], paths["curve"], paths["curve"], tmp_path / "x")
    assert not (tmp_path / "x").exists()
    Path(tmp_path / "taken").mkdir()
    with pytest.raises(PqflowError, match="exists"):
        prepare_attribution(runs["old"], runs["curve"], paths["old"], paths["curve"], tmp_path / "taken")


def test_a_new_valuation_date_is_its_own_time_roll_step(tmp_path, demo_config_dict):
    old = _small(demo_config_dict)
    new = _small(demo_config_dict, run={"valuation_date": "2026-12-31"})
    a = load_config(write_toml(tmp_path / "a.toml", old))
    b = load_config(write_toml(tmp_path / "b.toml", new))
    steps = step_configs(a, b)
    assert [s.name if s else None for s, _ in steps] == [None, "time_roll"]
    assert steps[-1][1]["run"]["valuation_date"] == "2026-12-31"


def test_unit_values_average_to_the_published_value(two_quarters):
    # The per-unit present values behind the paired SE are value_run's own plain estimate, unit by
    # unit (its published value adds control variates; the plain mean is kept beside it).
    import numpy as np

    from pqflow.liabilities import value_run
    from pqflow.liabilities.paired import paired_difference, unit_values

    _, _, runs = two_quarters
    u = unit_values(runs["old"], BOOK)
    v = value_run(runs["old"], BOOK, "market_consistent")
    assert u.values.shape[0] == v.sampling_units
    np.testing.assert_allclose(u.mean(), v.plain_value, rtol=1e-12, atol=1e-6)
    d, se, paired = paired_difference(u, u)
    assert paired and not np.any(d) and not np.any(se)  # a run against itself: zero, exactly
