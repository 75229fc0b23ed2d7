"""Comparing two runs: the edits we made between them must be exactly what it reports, matched
by what each input is.

References used below:
- The known edits themselves (common practice for a diff: a run compared with itself shows
  nothing; a changed input shows with its old and new values and the difference).
- The market price of equity risk ``lambda_S = ERP / sigma_S`` (Girsanov; Hull, Options,
  Futures and Other Derivatives, ch. on the market price of risk): raising the premium from
  3.5% to 4.5% with sigma_S = 17% raises it by 0.01 / 0.17.
- Zero rate ``-ln P(0, t) / t`` of a curve given as continuously compounded zero rates equals
  the input rate at a pillar; shifting every input zero rate by 25 bp moves each pillar's zero
  rate by exactly 25 bp.
- An equity forward ``S e^{-qT} / P(0, T)`` (common practice): an at-the-money-forward strike
  has moneyness 100% whatever the curve, so a curve move must not turn it into a new option.
- 1 bp = 1e-4 (common practice).
- HTML parsed with Python's standard ``html.parser``; no ``http(s)`` references (offline page).
"""

from __future__ import annotations

import copy
import json
import re
from html import escape
from html.parser import HTMLParser
from pathlib import Path

import pytest
from test_validation_checks import build_run

from pqflow import CAUTION
from pqflow.report.compare import compare_runs, comparison_json, summary_lines, write_compare_html

REPO = Path(__file__).resolve().parents[1]
SCI = re.compile(r"\d[eE][+-]?\d")

__all__: list[str] = []


@pytest.fixture(scope="module")
def runs(tmp_path_factory, demo_config_dict) -> dict[str, Path]:
    from pqflow.liabilities import value_liabilities_cli

    root = tmp_path_factory.mktemp("compare")
    a = build_run(root, demo_config_dict, scenarios=400, horizon=25, name="q2")
    b = build_run(root, demo_config_dict, scenarios=400, horizon=25, seed=7, name="q3",
                  edits={"real_world": {"equity_risk_premium": 0.045}})
    shifted = copy.deepcopy(demo_config_dict)
    shifted["curve"]["values"] = [v + 0.0025 for v in shifted["curve"]["values"]]
    c = build_run(root, shifted, scenarios=400, horizon=25, name="q4")
    book = REPO / "scenario_configs" / "demo_liabilities.toml"
    for run in (a, c):
        value_liabilities_cli(run, book)
    return {"a": a, "b": b, "curve": c}


def _by_item(moves):
    return {m.item: m for m in moves}


def test_compare_reports_the_edits(runs):
    cmp = compare_runs(runs["a"], runs["b"])
    moved = [m for m in cmp.inputs if m.status != "same"]
    assert [m.item for m in moved] == ["real world: equity risk premium"]  # nothing else moved
    erp = moved[0]
    assert (erp.old, erp.new) == (0.035, 0.045)
    assert erp.move == pytest.approx(0.01, abs=1e-15)
    assert erp.shown() == ("3.500%", "4.500%", "+100.0 bp")  # a rate move in bp, not in percent
    params = _by_item(cmp.parameters)
    lam = params["equity veldmark_all_share price of risk"]
    assert lam.move == pytest.approx(0.01 / 0.17, rel=1e-12)  # lambda_S = ERP / sigma_S
    assert params["Hull-White volatility sigma (normal)"].status == "same"
    assert not [k for k in params if "[" in k or "indices" in k]  # no internal paths
    ident = _by_item(cmp.identity)
    assert ident["root seed"].shown()[:2] == ("20260930", "7")  # a seed is an identifier, not a move
    assert ident["valuation date"].status == "same"
    assert cmp.liabilities == ()  # only one of the two was valued


def test_a_run_compared_with_itself_shows_nothing(runs):
    cmp = compare_runs(runs["a"], runs["a"])
    assert all(m.status == "same" for m in (*cmp.inputs, *cmp.parameters, *cmp.checks, *cmp.identity))
    assert all(m.move == 0.0 for m in cmp.liabilities)
    lines = summary_lines(cmp)
    assert [r for r in lines if r[0] == "row" and r[1] not in {m.item for m in cmp.liabilities}] == []


def test_curve_move_is_matched_by_maturity_and_instruments_by_meaning(runs):
    cmp = compare_runs(runs["a"], runs["curve"])
    curve = _by_item([m for m in cmp.inputs if m.group == "curve"])
    assert curve["zero rate 5y"].old == pytest.approx(0.0256, abs=1e-12)  # the input zero rate
    for m in curve.values():  # every pillar moved by the +25 bp we applied
        assert m.move == pytest.approx(0.0025, abs=1e-12), m.item
        assert m.shown()[2] == "+25.0 bp"
    # The ATM-forward strikes moved with the curve; the instruments are still the same ones.
    assert not [m for m in cmp.inputs if m.status in ("added", "removed")]
    swaptions = _by_item([m for m in cmp.inputs if m.group == "swaptions"])
    assert "swaption 1y x 5y" in swaptions and "swaption 10y x 10y (shifted_lognormal)" in swaptions
    options = [m.item for m in cmp.inputs if m.group == "equity_options"]
    assert options == ["veldmark_all_share 5y, moneyness 100%", "veldmark_all_share 10y put, moneyness 100%"]
    # Both runs valued: best estimate, guarantee and TVOG by line, and the total.
    liab = _by_item(cmp.liabilities)
    assert {"total: best estimate", "total: guarantee value", "total: TVOG"} <= set(liab)
    be = liab["total: best estimate"]
    assert be.move == pytest.approx(be.new - be.old) and be.move < 0  # higher rates, lower BE
    assert re.fullmatch(r"-\d{1,3}(,\d{3})+", be.shown()[2])
    assert cmp.liability_se["total: best estimate"][0] > 0


def test_terminal_summary_is_short_and_json_is_complete(runs):
    cmp = compare_runs(runs["a"], runs["curve"])
    lines = summary_lines(cmp)
    assert len(lines) <= 60
    assert any(r[1] == "zero rate 10y" for r in lines)
    everything = summary_lines(cmp, everything=True)
    assert len(everything) > len(lines)
    data = json.loads(json.dumps(comparison_json(cmp)))
    assert {"identity", "inputs", "parameters", "checks", "liabilities", "unchanged"} <= set(data)
    zero10 = next(r for r in data["inputs"] if r["item"] == "zero rate 10y")
    assert zero10["unit"] == "rate" and zero10["change"] == pytest.approx(0.0025, abs=1e-12)
    assert zero10["move"] == "+25.0 bp"


def test_html_page_has_charts_and_tables_that_fit(runs, tmp_path):
    cmp = compare_runs(runs["a"], runs["curve"])
    path = write_compare_html(cmp, tmp_path / "compare.html")
    html = path.read_text(encoding="utf-8")

    class Parse(HTMLParser):
        def __init__(self):
            super().__init__()
            self.ids, self.links, self.num, self._num, self.svgs = [], [], [], None, 0

        def handle_starttag(self, tag, attrs):
            a = dict(attrs)
            if "id" in a:
                self.ids.append(a["id"])
            if "src" in a or "href" in a:
                self.links.append(a.get("src") or a.get("href"))
            if tag == "td" and "num" in (a.get("class") or ""):
                self._num = []
            if tag == "svg":
                self.svgs += 1

        def handle_endtag(self, tag):
            if tag == "td" and self._num is not None:
                self.num.append("".join(self._num))
                self._num = None

        def handle_data(self, data):
            if self._num is not None:
                self._num.append(data)

    p = Parse()
    p.feed(html)
    for section in ("identity", "charts", "inputs", "parameters", "checks", "liabilities"):
        assert f"compare-{section}" in p.ids
    assert p.svgs >= 2  # the curve old against new, and moves by instrument
    assert "curve, old against new" in html
    assert p.links == [] and "http://" not in html and "https://" not in html
    assert html[html.index("<body>"):].count(escape(CAUTION)) == 2
    assert not [t for t in p.num if SCI.search(t)]
    assert "table-layout:fixed" in html  # the input table fits the page
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_command_prints_a_short_summary_json_and_a_page(runs, tmp_path):
    from typer.testing import CliRunner

    from pqflow.cli import app

    runner = CliRunner()
    args = ["compare", str(runs["a"]), str(runs["curve"])]
    short = runner.invoke(app, args)
    assert short.exit_code == 0, short.output
    assert len(short.output.splitlines()) <= 60
    assert "+25.0 bp" in short.output and "total: best estimate" in short.output
    assert "indices[" not in short.output and "(+10." not in short.output  # no internal paths, no relative rate moves
    full = runner.invoke(app, [*args, "--all"])
    assert len(full.output.splitlines()) > len(short.output.splitlines())
    as_json = runner.invoke(app, [*args, "--json", "--html", str(tmp_path / "c.html")])
    assert as_json.exit_code == 0
    data = json.loads(as_json.stdout)
    assert data["new_run"] == str(runs["curve"])
    assert (tmp_path / "c.html").is_file()


def test_a_changed_verdict_is_listed(runs, tmp_path):
    import shutil

    edited = tmp_path / "edited"
    shutil.copytree(runs["a"], edited)
    path = edited / "validation" / "summary.json"
    summary = json.loads(path.read_text())
    old_check, old_overall = summary["checks"]["martingale_real_world"]["verdict"], summary["verdict"]
    assert old_check != "fail" and old_overall != "fail"
    summary["checks"]["martingale_real_world"]["verdict"] = "fail"
    summary["verdict"] = "fail"
    path.write_text(json.dumps(summary))
    cmp = compare_runs(runs["a"], edited)
    changed = {m.item: m.shown()[:2] for m in cmp.checks if m.status != "same"}
    assert changed == {"martingale real world": (old_check, "fail"), "overall verdict": (old_overall, "fail")}
    lines = summary_lines(cmp)
    assert ("title", "Checks whose verdict changed", "old", "new", "") in lines
