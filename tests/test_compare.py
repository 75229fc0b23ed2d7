"""Comparing two runs: the edits we made between them must be exactly what it reports.

References used below:
- The known edits themselves (common practice for a diff: a run compared with itself shows
  nothing; a changed input shows with its old and new values and the difference).
- The market price of equity risk ``lambda_S = ERP / sigma_S`` (DOMAIN.md s. 3, Girsanov):
  raising the premium from 3.5% to 4.5% with sigma_S = 17% raises it by 0.01 / 0.17.
- Zero rate ``-ln P(0, t) / t`` of a curve given as continuously compounded zero rates equals
  the input rate at a pillar.
- HTML parsed with Python's standard ``html.parser``; no ``http(s)`` references (offline page).
"""

from __future__ import annotations

from html import escape
from html.parser import HTMLParser
from pathlib import Path

import pytest

from pqflow import CAUTION
from pqflow.report.compare import COMPARE_COLUMNS, compare_runs, render_compare_text, write_compare_html
from test_validation_checks import build_run

__all__: list[str] = []


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory, demo_config_dict) -> tuple[Path, Path]:
    root = tmp_path_factory.mktemp("compare")
    a = build_run(root, demo_config_dict, scenarios=400, horizon=10, name="q2")
    b = build_run(root, demo_config_dict, scenarios=400, horizon=10, seed=7, name="q3",
                  edits={"real_world": {"equity_risk_premium": 0.045}})
    return a, b


def _by_item(changes):
    return {c.item: c for c in changes}


def test_compare_reports_the_edits(two_runs):
    a, b = two_runs
    cmp = compare_runs(a, b)
    inputs = _by_item(cmp.inputs)
    erp = inputs["real_world.equity_risk_premium"]
    assert (erp.before, erp.after) == (0.035, 0.045)
    assert erp.difference == pytest.approx(0.01, abs=1e-15)
    assert set(inputs) == {"real_world.equity_risk_premium"}  # nothing else in the inputs moved
    params = _by_item(cmp.parameters)
    lam = params["market_prices_of_risk.equity"]
    assert lam.difference == pytest.approx(0.01 / 0.17, rel=1e-12)  # lambda_S = ERP / sigma_S
    assert "hull_white.volatility" not in params  # unchanged parameters are counted, not listed
    assert cmp.unchanged_parameters > 0
    ident = _by_item(cmp.identity)
    assert ident["root seed"].changed and (ident["root seed"].before, ident["root seed"].after) == (20260930, 7)
    assert not ident["valuation date"].changed
    checks = _by_item(cmp.checks)
    assert "reconciliation: verdict" in checks and "market_consistency: verdict" in checks
    assert any(k.startswith("market_consistency: swaption") for k in checks)
    recon = _by_item(cmp.reconciliation)
    # A new seed moves the Monte Carlo values; the closed form depends on rates and equity
    # volatility only, which did not change.
    assert recon["guarantee value.market_consistent"].changed
    assert not recon["guarantee value.closed_form"].changed


def test_a_run_compared_with_itself_shows_nothing(two_runs):
    a, _ = two_runs
    cmp = compare_runs(a, a)
    assert cmp.inputs == () and cmp.parameters == ()
    assert not any(c.changed for c in (*cmp.identity, *cmp.checks, *cmp.reconciliation))
    zero = [c for c in cmp.parameters if c.item.startswith("curve zero rate")]
    assert zero == []


def test_curve_points_are_the_input_zero_rates(two_runs):
    from pqflow.report.compare import _parameters
    from pqflow.storage.jsonio import read_json

    a, _ = two_runs
    params = _parameters(read_json(a / "calibration.json"))
    # The typed demo gives continuously compounded zero rates: 2.56% at 5y, 2.81% at 10y.
    assert params["curve zero rate 5y (continuous)"] == pytest.approx(0.0256, abs=1e-12)
    assert params["curve zero rate 10y (continuous)"] == pytest.approx(0.0281, abs=1e-12)


def test_text_rows_and_html_page(two_runs, tmp_path):
    a, b = two_runs
    cmp = compare_runs(a, b)
    rows = render_compare_text(cmp)
    assert len(COMPARE_COLUMNS) == 5 and all(len(r) == 5 and all(isinstance(x, str) for x in r) for r in rows)
    erp = [r for r in rows if r[1] == "real_world.equity_risk_premium"]
    assert erp == [("inputs", "real_world.equity_risk_premium", "0.035", "0.045", "+0.01 (+28.57%)")]

    path = write_compare_html(cmp, tmp_path / "compare.html")
    html = path.read_text(encoding="utf-8")

    class Links(HTMLParser):
        ids: list[str] = []
        links: list[str] = []

        def handle_starttag(self, tag, attrs):
            for k, v in attrs:
                if k == "id":
                    self.ids.append(v)
                if k in ("src", "href"):
                    self.links.append(v)

    parser = Links()
    parser.feed(html)
    for section in ("identity", "inputs", "parameters", "checks", "reconciliation"):
        assert f"compare-{section}" in parser.ids
    assert parser.links == [] and "http://" not in html and "https://" not in html
    assert html.count(escape(CAUTION)) == 2
    assert "real_world.equity_risk_premium" in html
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]
