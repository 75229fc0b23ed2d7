"""The evidence pack read as a reviewer reads it: the sign-off page, number formats, three-state
verdicts, shared axes, and the number-formatting rule itself.

References used below:
- Thousands separators, percent and basis points: 1 bp = 0.01% = 1e-4 (common practice in
  financial reporting); a volatility "point" is one percent of volatility (common practice).
- Significant figures of an estimate with an uncertainty: "quote the uncertainty to one or two
  significant figures and the value to the same decimal place" (Taylor, An Introduction to
  Error Analysis, 2nd ed., 1997, s. 2.2; from memory).
- HTML parsed with Python's standard ``html.parser``.
"""

from __future__ import annotations

import json
import re
import shutil
from html import escape
from html.parser import HTMLParser
from pathlib import Path

import pytest
from test_validation_checks import build_run

from pqflow import CAUTION
from pqflow.report import numbers as fmt
from pqflow.report.html import SignOff, _drivers, build_report_html

REPO = Path(__file__).resolve().parents[1]
SCI = re.compile(r"\d[eE][+-]?\d")

__all__: list[str] = []


# -- the formatting rule -----------------------------------------------------------------------

def test_money_rates_vols_and_tiny_values():
    assert fmt.money(82_701_512.43) == "82,701,512"  # thousands separators, whole units
    assert fmt.money(82_701_512.43, scale=1_000) == "82,702"  # a stated scale
    assert fmt.money_se(82_701_512.4, 645_197.4) == "82,701,512 ± 645,197"
    assert fmt.percent(0.02318) == "2.318%"
    assert fmt.bp_move(0.0025) == "+25.0 bp"  # 1 bp = 1e-4
    assert fmt.bp_move(-0.00244) == "-24.4 bp"
    assert fmt.vol_points(0.175) == "17.50" and fmt.vol_move(0.01) == "+1.00 pt"
    assert fmt.number(2.7755575615628914e-17) == "< 1e-10"  # exact to rounding
    assert fmt.vol_points(-2.8e-17) == "< 1e-10"
    assert fmt.number(0.0) == "0" and fmt.money(-0.4) == "0"  # no "-0"
    assert fmt.number(0.1755724133497857) == "0.1756"


def test_price_shows_the_digits_its_standard_error_supports():
    # Taylor (1997) s. 2.2: SE to two significant figures, the value to the same decimals.
    assert fmt.price_se(117.0114493, 2.747387) == "117.0 ± 2.7"
    assert fmt.price_se(0.003297218, 7.811e-05) == "0.003297 ± 0.000078"
    assert fmt.price_se(12_345.678, 456.7) == "12,346 ± 457"
    assert fmt.price(118.83764859, 0.0) == "118.838"  # exact (closed form): six significant digits
    assert fmt.decimals_for_se(0.0095) == 4


def test_no_number_is_ever_printed_with_an_exponent():
    for k in range(-30, 16):
        for mantissa in (1.0, -3.7, 9.99):
            x = mantissa * 10.0**k
            for f in (fmt.number, fmt.money, fmt.percent, fmt.price, fmt.signed, fmt.vol_points):
                text = f(x)
                assert not SCI.search(text.replace("1e-10", "")), (f.__name__, x, text)


# -- the report of a run -------------------------------------------------------------------------

class _Cells(HTMLParser):
    """Text of every table cell with its class; the y-axis of every chart inside a .pair."""

    def __init__(self) -> None:
        super().__init__()
        self.cells: list[tuple[str, str]] = []
        self.pairs: list[list[str]] = []
        self.badges: list[tuple[str, str]] = []
        self._cell: list[str] | None = None
        self._cls = ""
        self._divs: list[bool] = []  # open <div>s: is it a .pair
        self._badge: str | None = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag in ("td", "th"):
            self._cell, self._cls = [], a.get("class") or ""
        if tag == "div":
            is_pair = "pair" in (a.get("class") or "").split()
            self._divs.append(is_pair)
            if is_pair:
                self.pairs.append([])
        if tag == "svg" and "data-y-axis" in a and self._divs and self._divs[-1]:
            self.pairs[-1].append(a["data-y-axis"])
        if tag == "span" and "badge" in (a.get("class") or ""):
            self._badge = a["class"]

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.cells.append((self._cls, "".join(self._cell).strip()))
            self._cell = None
        if tag == "div" and self._divs:
            self._divs.pop()

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._badge is not None:
            self.badges.append((self._badge, data))
            self._badge = None


@pytest.fixture(scope="module")
def valued_run(tmp_path_factory, demo_config_dict) -> Path:
    from pqflow.liabilities import value_liabilities_cli

    run = build_run(tmp_path_factory.mktemp("pages"), demo_config_dict, scenarios=400, horizon=25)
    value_liabilities_cli(run, REPO / "scenario_configs" / "demo_liabilities.toml")
    return run


def _cells(html: str) -> _Cells:
    p = _Cells()
    p.feed(html)
    p.close()
    return p


def test_numbers_in_tables_have_no_exponent_and_money_has_separators(valued_run):
    html = build_report_html(valued_run)
    parsed = _cells(html)
    numeric = [t for cls, t in parsed.cells if "num" in cls.split()]
    assert len(numeric) > 200
    assert not [t for t in numeric if SCI.search(t.replace("1e-10", ""))]
    # Money: the best estimate of the total line, as grouped whole units with its SE.
    val = json.loads((valued_run / "valuation" / "summary.json").read_text())
    total = next(r for r in val["lines"] if r["name"] == "total" and r["quantity"] == "best_estimate")
    expected = f"{round(total['market_consistent_value']):,} ± {round(total['market_consistent_se']):,}"
    assert expected in [t for _, t in parsed.cells]
    assert re.search(r"\d{1,3}(,\d{3}){2,} ± \d{1,3}(,\d{3})+", html)


def test_p_and_q_panels_share_the_y_axis(valued_run):
    parsed = _cells(build_report_html(valued_run))
    pairs = [p for p in parsed.pairs if p]
    assert len(pairs) >= 6  # short rate, 25-year yield, equity, and martingale pairs
    for p in pairs:
        assert len(p) == 2 and p[0] == p[1], p


def test_every_driver_gets_a_fan_chart_grouped_by_asset_class():
    # Column names of the full demo economy (rates, two equities, property, inflation, credit).
    names = ["scenario", "time", "short_rate", "cash_account", "deflator", "zcb_1y", "zcb_10y", "zcb_30y",
             "equity_veldmark_all_share", "equity_world_equity", "property_veldmark_property", "cpi",
             "real_short_rate", "real_zcb_5y", "real_zcb_20y", "intensity_AA", "cumulative_intensity_AA",
             "spread_AA_1y", "spread_AA_10y", "dzcb_AA_10y", "intensity_BBB", "spread_BBB_10y", "q_density"]
    drivers = _drivers(names)
    by_group: dict[str, list[str]] = {}
    for d in drivers:
        by_group.setdefault(d.group, []).append(d.label)
    assert list(by_group) == ["Nominal rates", "Equity", "Property", "Inflation and real rates", "Credit"]
    assert by_group["Nominal rates"] == ["short rate", "30-year zero yield"]
    assert len(by_group["Equity"]) == 2 and len(by_group["Property"]) == 1
    assert by_group["Inflation and real rates"] == ["CPI", "real short rate", "20-year real zero yield"]
    assert by_group["Credit"] == ["AA default intensity", "AA 10-year credit spread", "BBB default intensity",
                                  "BBB 10-year credit spread"]


def _with_summary(run: Path, tmp_path: Path, edit) -> Path:
    out = tmp_path / "edited"
    shutil.copytree(run, out)
    path = out / "validation" / "summary.json"
    summary = json.loads(path.read_text())
    edit(summary)
    path.write_text(json.dumps(summary))
    return out


def test_three_state_verdicts_usable_horizons_and_budget(valued_run, tmp_path):
    def edit(s):  # the issue-11 schema, by hand
        s["verdict"] = "inconclusive"
        c = s["checks"]["martingale_real_world"]
        c.update(verdict="inconclusive", inconclusive_cells=37, inconclusive_from_time=14.0,
                 material_deviation=0.02, power_rule="power 80% against a 2% deviation")
        s["inconclusive"] = {"cells": 37, "from_time": 14.0, "checks": ["martingale_real_world"]}
        s["densities"] = [
            {"measure": "real_world", "column": "q_density", "block": None, "usable_horizon": 12.0,
             "ess_share_at_horizon": 0.004, "max_weight_share_at_horizon": 0.41},
            {"measure": "market_consistent", "column": "p_density", "block": "equity", "usable_horizon": None,
             "ess_share_at_horizon": 0.31, "max_weight_share_at_horizon": 0.02},
        ]
        s["density_budget"] = {"real_world": {"rates": 0.7, "veldmark_all_share": 0.3}}

    run = _with_summary(valued_run, tmp_path, edit)
    html = build_report_html(run)
    signoff = html[html.index('id="signoff"'):html.index('id="identity"')]
    assert 'class="badge inconclusive"' in signoff  # amber, on the sign-off page
    assert "usable only to t = 12 years" in signoff  # warnings at the top
    assert "37 cells cannot be judged from t = 14" in signoff
    assert "to the horizon" in signoff and "to t = 12 years" in signoff
    assert "power 80% against a 2% deviation" in html
    assert "70.0%" in html and "Density budget" in html


def test_informational_result_has_one_badge_and_old_runs_still_render(valued_run, tmp_path):
    def as_old(s):  # a summary written before the three-state schema: no horizons, no budget
        for key in ("densities", "density_budget", "inconclusive"):
            s.pop(key, None)

    html = build_report_html(_with_summary(valued_run, tmp_path, as_old))
    parsed = _cells(html)
    wealth_rows = re.findall(r"<tr><td class=\"l\">[^<]*equity wealth ratios.*?</tr>", html)
    assert wealth_rows
    for row in wealth_rows:
        assert row.count('class="badge') == 1 and 'class="badge info"' in row
    assert "not assessed in this run" in html  # no usable horizons recorded: said so, not invented
    assert any(cls == "badge pass" for cls, _ in parsed.badges)


def test_signoff_names_from_command_line_or_manifest_are_escaped(valued_run, tmp_path):
    html = build_report_html(valued_run, SignOff(prepared_by="A. <Valuer>", reviewed_by=""), today="2026-10-15")
    signoff = html[html.index('id="signoff"'):html.index('id="identity"')]
    assert "A. &lt;Valuer&gt;" in signoff and "<Valuer>" not in signoff
    assert "2026-10-15" in signoff
    run = tmp_path / "named"
    shutil.copytree(valued_run, run)
    man = json.loads((run / "manifest.json").read_text())
    man["signoff"] = {"prepared_by": "C. From-Config", "reviewed_by": "D. Reviewer"}
    (run / "manifest.json").write_text(json.dumps(man))
    html = build_report_html(run, SignOff(prepared_by="E. Command-Line"))
    assert "E. Command-Line" in html and "C. From-Config" not in html and "D. Reviewer" in html
    assert html[html.index("<body>"):].count(escape(CAUTION)) == 3  # top, foot of the sign-off page, bottom


def test_report_prints_the_signoff_page_on_its_own_page(valued_run):
    html = build_report_html(valued_run)
    css = html[html.index("<style>"):html.index("</style>")]
    assert "@media print" in css and "size:A4" in css
    assert re.search(r"\.signoff\{[^}]*break-after:page", css)
    assert re.search(r"table,[^{]*\{break-inside:avoid", css)
    # Printed, every page carries the caution in its bottom margin (CSS Paged Media margin box).
    footer = re.search(r'@bottom-center\{content:"([^"]*)"', css)
    assert footer and "qualified professionals" in footer.group(1) and footer.group(1).startswith("Caution:")


def test_signoff_table_of_the_configuration_reaches_the_report(tmp_path, demo_config_dict):
    run = build_run(tmp_path, demo_config_dict, scenarios=200, horizon=10, name="named",
                    edits={"signoff": {"prepared_by": "F. Preparer", "reviewed_by": "G. Reviewer"}})
    manifest = json.loads((run / "manifest.json").read_text())
    assert manifest["signoff"] == {"prepared_by": "F. Preparer", "reviewed_by": "G. Reviewer"}
    html = build_report_html(run)
    signoff = html[html.index('id="signoff"'):html.index('id="identity"')]
    assert "F. Preparer" in signoff and "G. Reviewer" in signoff


def test_text_from_the_run_files_is_escaped(valued_run, tmp_path):
    # Common practice (OWASP, output encoding): text read from files is data, never markup.
    run = tmp_path / "hostile"
    shutil.copytree(valued_run, run)
    cal = json.loads((run / "calibration.json").read_text())
    cal["parameters"]["curve"]["description"] = "<script>alert(1)</script>"
    cal["fit"] = {"curve": {"method": "<img src=x onerror=alert(2)>", "max_repricing_error": 1e-17}}
    (run / "calibration.json").write_text(json.dumps(cal))
    s = json.loads((run / "validation" / "summary.json").read_text())
    s["checks"]["real_world"]["warnings"] = ["<b>bold</b> warning"]
    (run / "validation" / "summary.json").write_text(json.dumps(s))
    html = build_report_html(run)
    assert "<script>" not in html and "<img" not in html and "<b>bold" not in html
    assert "&lt;img src=x onerror=alert(2)&gt;" in html and "&lt;b&gt;bold&lt;/b&gt; warning" in html
    assert "< 1e-10" not in html.replace("&lt; 1e-10", "")  # the tiny marker is escaped too
