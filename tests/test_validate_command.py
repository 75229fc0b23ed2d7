"""``pqflow validate RUN_DIR``, the three verdicts in the summary, and density blocks.

Sources named beside each check:
- ``E[Z_t] = 1`` for a density process (any probability text), for a block-like weight column
  (a lognormal weight ``exp(sigma W_t - sigma^2 t / 2)``, mean 1 by the lognormal mean identity);
- the martingale test's family-wise rule (Bonferroni; common practice), as in
  tests/test_validation_checks.py;
- the manifest's sha256 of every file (common practice for audit trails).
"""

from __future__ import annotations

import hashlib
import shutil
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from test_validation_checks import _rewrite_parts, build_run
from typer.testing import CliRunner

from pqflow.cli import app
from pqflow.storage.jsonio import read_json, write_json_atomic
from pqflow.storage.manifest import MANIFEST, build_manifest
from pqflow.validation.evidence import run_checks

runner = CliRunner()
SUMMARY_KEYS = {"verdict", "inconclusive_cells", "inconclusive_from_time", "material_deviation", "power_rule"}


@pytest.fixture(scope="module")
def small_run(tmp_path_factory, demo_config_dict) -> Path:
    return build_run(tmp_path_factory.mktemp("validate"), demo_config_dict, scenarios=400, horizon=10,
                     instruments=False)


def _copy(run: Path, tmp_path: Path, name: str = "copy") -> Path:
    out = tmp_path / name
    shutil.copytree(run, out)
    return out


def _digests(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir()) if p.is_file()}


def _reseal(run: Path) -> None:
    """Record the run's current files in its manifest (a consistent copy, e.g. exported)."""
    header = {k: v for k, v in read_json(run / MANIFEST).items() if k != "files"}
    write_json_atomic(run / MANIFEST, build_manifest(run, header=header))


def test_summary_schema_of_the_three_verdicts(small_run):
    summary = read_json(small_run / "validation" / "summary.json")
    assert summary["verdict"] in ("pass", "inconclusive", "fail")
    assert set(summary["inconclusive"]) == {"cells", "from_time", "checks"}
    assert "inconclusive" in summary["rule"] and "fail" in summary["rule"]
    for name, entry in summary["checks"].items():
        assert SUMMARY_KEYS <= set(entry), name
        assert entry["verdict"] in ("pass", "inconclusive", "fail", "not_applicable"), name
    assert summary["checks"]["martingale_market_consistent"]["material_deviation"] == 0.05
    assert summary["checks"]["density_real_world"]["material_deviation"] == 0.10
    columns = {(d["measure"], d["column"]) for d in summary["densities"]}
    # the full densities and the default blocks (rates, rates_<equity>) of each set
    blocks = ("rates", "rates_veldmark_all_share")
    assert columns == {("real_world", "q_density"), ("market_consistent", "p_density"),
                       *(("real_world", f"q_density_{b}") for b in blocks),
                       *(("market_consistent", f"p_density_{b}") for b in blocks)}
    for d in summary["densities"]:
        assert set(d) == {"measure", "column", "block", "usable_horizon", "ess_share_at_horizon",
                          "max_weight_share_at_horizon"}
        assert d["block"] == (None if d["column"] in ("q_density", "p_density") else d["column"].split("_", 2)[2])
    assert set(summary["density_budget"]) == {"real_world", "market_consistent"}
    for shares in summary["density_budget"].values():
        assert sum(shares.values()) == pytest.approx(1.0, abs=1e-9)
    budget = (small_run / "validation" / "density_budget.csv").read_text().splitlines()[0]
    assert budget == "measure,time,price_of_risk,log_variance,share"


def test_validate_rewrites_validation_and_keeps_the_manifest_whole(small_run, tmp_path):
    run = _copy(small_run, tmp_path)
    (run / "validation" / "density_budget.csv").unlink()
    _reseal(run)
    stale = run / ".validation.new-0123456789ab"  # left by a process killed mid-write
    stale.mkdir()
    (stale / "summary.json").write_text("{}")
    result = runner.invoke(app, ["validate", str(run)])
    assert result.exit_code == 0, result.output
    assert (run / "validation" / "density_budget.csv").is_file()
    assert "usable" in result.output and "overall verdict" in result.output
    summary = read_json(run / "validation" / "summary.json")
    if summary["inconclusive"]["cells"]:
        assert f"{summary['inconclusive']['cells']} cells" in result.output
    assert runner.invoke(app, ["verify", str(run)]).exit_code == 0  # the manifest records the new files
    assert "revalidated_utc" in read_json(run / MANIFEST)
    assert not [p for p in run.iterdir() if p.name.startswith(".validation")]


def test_validate_checks_the_manifest_first(small_run, tmp_path):
    run = _copy(small_run, tmp_path)
    before = _digests(run / "validation")
    part = sorted((run / "scenarios" / "real_world").glob("part-*.parquet"))[0]
    part.write_bytes(part.read_bytes()[:-10])  # truncated in transit
    result = runner.invoke(app, ["validate", str(run)])
    assert result.exit_code == 2 and part.name in result.output
    assert _digests(run / "validation") == before  # nothing rewritten


def test_a_failed_validate_leaves_the_earlier_validation_whole(small_run, tmp_path, monkeypatch):
    import pqflow.storage.results as results

    run = _copy(small_run, tmp_path)
    before = _digests(run / "validation")
    calls = {"n": 0}
    real = results.write_csv_atomic

    def failing(frame, path):
        calls["n"] += 1
        if calls["n"] == 3:
            raise OSError("disk full (simulated)")
        return real(frame, path)

    monkeypatch.setattr(results, "write_csv_atomic", failing)
    from pqflow.jobs.steps import revalidate_run

    with pytest.raises(OSError):
        revalidate_run(run)
    assert _digests(run / "validation") == before
    assert not [p for p in run.iterdir() if p.name.startswith(".validation")]


def test_validate_exits_1_on_a_planted_defect(small_run, tmp_path):
    # A drift of 2% a year on the equity index of the market-consistent set breaks E[D S] = S_0
    # (Society of Actuaries 2016, s. 8.3); a copy whose manifest records the changed files
    # passes the manifest check and fails the martingale check.
    run = _copy(small_run, tmp_path)
    _rewrite_parts(run, "market_consistent", "equity_veldmark_all_share", lambda v, t: v * np.exp(0.02 * t))
    _reseal(run)
    result = runner.invoke(app, ["validate", str(run)])
    assert result.exit_code == 1, result.output
    assert read_json(run / "validation" / "summary.json")["checks"]["martingale_market_consistent"]["verdict"] == "fail"


def _add_block(run: Path, measure: str, column: str, sigma: float, scale: float, seed: int) -> None:
    """A block-like weight column ``scale * exp(sigma W_t - sigma^2 t / 2)`` in every part
    (antithetic pairs mirrored, as the engine's are)."""
    rng = np.random.default_rng(seed)
    for part in sorted((run / "scenarios" / measure).glob("part-*.parquet")):
        table = pq.read_table(part)
        t = table.column("time").to_numpy()
        scen = table.column("scenario").to_numpy()
        n_times = int(np.searchsorted(scen, scen[0], side="right"))
        n_paths = scen.size // n_times
        steps = rng.standard_normal((n_paths // 2, n_times - 1))
        w = np.zeros((n_paths // 2, n_times))
        w[:, 1:] = np.cumsum(steps, axis=1)
        w = np.stack([w, -w], axis=1).reshape(n_paths, n_times)
        times = t[:n_times]
        weight = scale * np.exp(sigma * w - 0.5 * sigma**2 * times[None, :])
        weight[:, 0] = 1.0
        if column in table.column_names:  # a block the run wrote already: replace it
            i = table.schema.get_field_index(column)
            table = table.set_column(i, table.schema.field(i), pa.array(weight.ravel()))
        else:
            table = table.append_column(column, pa.array(weight.ravel()))
        pq.write_table(table, part)


def test_density_blocks_are_judged_and_get_their_horizon(small_run, tmp_path):
    # Block columns q_density_<block> / p_density_<block> are found by name: each is tested
    # (E[Z_t] = 1) and gets its usable horizon. A correct lognormal block fails nothing; the
    # same block 20% low everywhere (after time 0) is never a pass.
    run = _copy(small_run, tmp_path)
    _add_block(run, "real_world", "q_density_rates", sigma=0.15, scale=1.0, seed=1)
    _add_block(run, "market_consistent", "p_density_credit_X", sigma=0.40, scale=1.0, seed=2)
    result = run_checks(run, ess_warning_share=0.5)
    dens = result.density["real_world"]
    assert set(dens["column"]) == {"q_density", "q_density_rates", "q_density_rates_veldmark_all_share"}
    block = dens[dens["column"] == "q_density_rates"]
    assert (block["test"] == "lognormal identity").all()
    credit_block = result.density["market_consistent"]
    assert (credit_block[credit_block["column"] == "p_density_credit_X"]["test"] == "robust t").all()
    summary = result.summary
    assert summary["checks"]["density_real_world"]["verdict"] != "fail"
    blocks = {d["column"]: d for d in summary["densities"]}
    assert blocks["q_density_rates"]["block"] == "rates"
    assert blocks["p_density_credit_X"]["block"] == "credit_X"
    # var(log w) = 0.16 t: the lognormal ESS share exp(-0.16 t) falls below 0.5 after 4.3 years
    assert blocks["p_density_credit_X"]["usable_horizon"] in (4.0, 5.0, 6.0)
    assert any("p_density_credit_X" in w for w in summary["checks"]["density_market_consistent"]["warnings"])

    low = _copy(small_run, tmp_path, "low")
    _add_block(low, "real_world", "q_density_rates", sigma=0.15, scale=0.8, seed=1)
    checks = run_checks(low, ess_warning_share=0.1).summary["checks"]
    assert checks["density_real_world"]["verdict"] == "fail"
    assert checks["density_real_world"]["worst_cell"]["column"] == "q_density_rates"


def test_terminal_lines_show_inconclusive_in_words_and_keep_brackets(small_run):
    # What `pqflow run` and `pqflow validate` print: the verdict word, the inconclusive count
    # and its start, a table row per density, and user text in brackets printed as written (rich
    # would otherwise read it as markup).
    from pqflow import cli

    summary = read_json(small_run / "validation" / "summary.json")
    summary["checks"]["martingale_real_world"].update(verdict="inconclusive", inconclusive_cells=7,
                                                      inconclusive_from_time=4.0)
    summary["checks"]["martingale_real_world"]["warnings"] = ["see [bold]note[/bold] in [validation]"]
    summary["inconclusive"] = {"cells": 7, "from_time": 4.0, "checks": ["martingale_real_world"]}
    with cli.console.capture() as captured:
        cli._print_validation(summary)
        cli.console.print(cli._verdict_line("inconclusive"))
    text = captured.get()
    assert "INCONCLUSIVE" in text and "7 cells" in text and "t = 4 years" in text
    assert "see [bold]note[/bold] in [validation]" in text
    # the densities as one table: a row per density, the full one and each restricted block
    rows = [line for line in text.splitlines() if "_density" in line]
    for measure, column in (("real-world", "q_density"), ("market-consistent", "p_density"),
                            ("real-world", "q_density_rates"), ("market-consistent", "p_density_rates")):
        assert sum(1 for r in rows if measure in r and f" {column} " in r) == 1, text
    assert "Density weights: usable horizon" in text
