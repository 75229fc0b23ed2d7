"""The HTML evidence pack and the Prefect artifact builders.

References used below:
- HTML structure parsed with Python's standard ``html.parser`` (the page must be well formed
  enough for it to find every section, chart and link).
- "Self-contained, opens offline": no ``src``/``href`` to ``http(s)``, no ``url(`` in styles,
  no script (common practice for archived reports).
- Prefect's rule for artifact keys, lowercase letters, digits and dashes (Prefect 3
  ``prefect.artifacts.create_table_artifact`` docstring).
- Nice axis numbers 1, 2, 5 x 10^k (Heckbert, *Nice Numbers for Graph Labels*, Graphics Gems,
  1990).
"""

from __future__ import annotations

import math
import re
from html import escape
from html.parser import HTMLParser
from pathlib import Path

import pytest
from test_validation_checks import build_run

from pqflow import CAUTION
from pqflow.report import write_report
from pqflow.report.html import SECTIONS
from pqflow.report.svg import nice_ticks
from pqflow.storage.manifest import verify_run

REPO = Path(__file__).resolve().parents[1]

__all__: list[str] = []


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.ids: list[str] = []
        self.tags: dict[str, int] = {}
        self.links: list[str] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags[tag] = self.tags.get(tag, 0) + 1
        for k, v in attrs:
            if k == "id" and v:
                self.ids.append(v)
            if k in ("src", "href", "xlink:href", "action") and v:
                self.links.append(v)

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def finished_run(tmp_path_factory, demo_config_dict) -> Path:
    from pqflow.liabilities import value_liabilities_cli

    run = build_run(tmp_path_factory.mktemp("report"), demo_config_dict, scenarios=400, horizon=25)
    value_liabilities_cli(run, REPO / "scenario_configs" / "demo_liabilities.toml")
    return run


def _parse(path: Path) -> tuple[_Collect, str]:
    html = path.read_text(encoding="utf-8")
    p = _Collect()
    p.feed(html)
    p.close()
    return p, html


def test_report_has_every_section_and_plot_and_no_external_reference(finished_run):
    path = write_report(finished_run)
    assert path == finished_run / "validation" / "report.html"
    parsed, html = _parse(path)
    for sid, _ in SECTIONS:
        assert sid in parsed.ids, sid
    assert "caution-top" in parsed.ids and "caution-bottom" in parsed.ids
    # The sign-off page comes first, right after the caution at the top.
    assert parsed.ids.index("signoff") < min(parsed.ids.index(sid) for sid, _ in SECTIONS[1:])
    assert html.index('id="caution-top"') < html.index('id="signoff"')
    assert html.rindex('id="caution-bottom"') > html.index('id="liabilities"')
    # Fan pairs (short rate, 25-year yield, equity), the curve, martingale pairs, density and
    # market-consistency charts.
    assert parsed.tags.get("svg", 0) >= 20
    assert parsed.tags.get("script", 0) == 0
    assert not [u for u in parsed.links if re.match(r"(?i)\s*([a-z]+:|//|/)", u)]  # no scheme, host or root
    # Links go to the page's own sections or to the run's files beside it, which exist.
    for u in parsed.links:
        if not u.startswith("#"):
            assert (finished_run / "validation" / u).resolve().is_file(), u
    for csv in ("martingale.csv", "density.csv", "market_consistency.csv", "reconciliation.csv",
                "../valuation/liability_values.csv", "../calibration.json"):
        assert csv in parsed.links, csv
    assert "http://" not in html and "https://" not in html and "url(" not in html
    # Top and bottom of the page, and at the foot of the sign-off page (printed on its own).
    assert html[html.index("<body>"):].count(escape(CAUTION)) == 3
    signoff = html[html.index('id="signoff"'):html.index('id="identity"')]
    assert signoff.rstrip().count(escape(CAUTION)) == 1
    text = " ".join(parsed.text)
    for needle in ("2026-09-30", "root seed", "configuration sha256", "pqflow 0.1.0",
                   "American Academy of Actuaries", "swaption 5y x 5y", "prepared by", "reviewed by"):
        assert needle in text, needle


def test_report_is_outside_the_manifest_and_rewrites_atomically(finished_run):
    write_report(finished_run)
    verify_run(finished_run)  # the derived view does not break the audit trail
    first = (finished_run / "validation" / "report.html").read_bytes()
    write_report(finished_run)
    verify_run(finished_run)
    assert (finished_run / "validation" / "report.html").read_bytes() == first  # a pure view
    assert not [p for p in (finished_run / "validation").iterdir() if p.name.startswith(".")]


def test_report_before_the_manifest(tmp_path, demo_config_dict):
    run = build_run(tmp_path, demo_config_dict, scenarios=200, horizon=10, manifest=False, instruments=False)
    parsed, html = _parse(write_report(run))
    assert "not written yet" in html
    assert "no instruments in calibration.json" in html  # market consistency not applicable
    assert parsed.tags.get("svg", 0) >= 16


def test_nice_ticks_are_round_numbers():
    # Heckbert (1990): steps of 1, 2 or 5 times a power of ten covering the range.
    assert nice_ticks(0.0, 0.97) == [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]
    ticks = nice_ticks(-0.013, 0.081)
    step = ticks[1] - ticks[0]
    assert ticks[0] <= -0.013 and ticks[-1] >= 0.081
    assert round(step / 10 ** math.floor(math.log10(step)), 9) in (1, 2, 5)


# -- Prefect artifacts ------------------------------------------------------------------------

def test_artifact_builders_and_publish(finished_run, monkeypatch):
    import prefect.artifacts as artifacts

    import pqflow.pipeline.artifacts as mod
    from pqflow.storage.jsonio import read_json

    summary = read_json(finished_run / "validation" / "summary.json")
    key_rule = re.compile(r"^[a-z0-9-]+$")  # Prefect: lowercase letters, numbers and dashes
    table = mod.verdict_table(summary)
    names = {r["check"] for r in table}
    assert {"market-consistency", "real-world", "reconciliation", "real-world-wealth-ratio-benchmark"} <= names
    for rows in (table, mod.instrument_table(summary), mod.reconciliation_table(summary)):
        assert rows
        assert all(key_rule.match(k) for r in rows for k in r)
    md = mod.verdict_markdown(summary, "validation/report.html")
    assert md.count(CAUTION) == 1 and str(summary["verdict"]).upper() in md and "validation/report.html" in md

    calls = []
    monkeypatch.setattr(artifacts, "create_markdown_artifact",
                        lambda markdown, key=None, description=None: calls.append(("md", key)) or "id-md")
    monkeypatch.setattr(artifacts, "create_table_artifact",
                        lambda table, key=None, description=None: calls.append(("table", key)) or f"id-{key}")
    ids = mod.publish_artifacts(summary, "validation/report.html")
    assert [c[0] for c in calls] == ["md", "table", "table", "table"]
    assert all(key_rule.match(k) for k in ids)


def test_the_run_file_records_read_a_real_runs_files_as_written(finished_run):
    # common practice for one owner per format: the typed readers give back what the run wrote
    import json

    from pqflow.storage.manifest import read_manifest
    from pqflow.storage.validation_summary import read_validation_summary
    from pqflow.storage.valuation_summary import read_valuation_summary

    raw = json.loads((finished_run / "validation" / "summary.json").read_text(encoding="utf-8"))
    summary = read_validation_summary(finished_run / "validation" / "summary.json")
    assert summary.to_json() == raw and summary.verdict == raw["verdict"]
    assert list(summary.checks) == list(raw["checks"])
    for name, c in summary.checks.items():
        entry = raw["checks"][name]
        assert (c.verdict, c.cells, c.family_critical_z, c.inconclusive_cells, c.power_rule) == (
            entry["verdict"], entry.get("cells"), entry.get("family_critical_z"), entry.get("inconclusive_cells"),
            entry.get("power_rule"))
        assert c.counts_toward_verdict == entry.get("counts_toward_verdict", True)
        assert {**c.extras, **{k: v for k, v in entry.items() if k not in c.extras}} == entry
    assert summary.inconclusive is not None and summary.inconclusive.cells == raw["inconclusive"]["cells"]
    assert [dict(d) for d in summary.densities or ()] == raw["densities"]
    density = summary.check("density_real_world")
    assert density is not None and density.ess_warning_share == raw["checks"]["density_real_world"]["ess_warning_share"]

    manifest_raw = json.loads((finished_run / "manifest.json").read_text(encoding="utf-8"))
    manifest = read_manifest(finished_run)
    assert {**manifest.header(), "files": list(manifest.files)} == manifest_raw
    assert manifest.root_seed == manifest_raw["seeds"]["root_seed"]
    assert (manifest.run_name, manifest.config_sha256) == (manifest_raw["run_name"], manifest_raw["config_sha256"])
    assert set(manifest.file_entries()) == {f["path"] for f in manifest_raw["files"]}

    val_raw = json.loads((finished_run / "valuation" / "summary.json").read_text(encoding="utf-8"))
    val = read_valuation_summary(finished_run / "valuation" / "summary.json")
    assert dict(val.document) == val_raw and [dict(e) for e in val.line_entries()] == val_raw["lines"]
    total = {line["name"]: line for line in val_raw["lines"]
             if line["quantity"] == "best_estimate" and line["level"] in ("product", "total")}
    assert val.best_estimates("market_consistent", plain=False) == {
        n: line["market_consistent_value"] for n, line in total.items()}
