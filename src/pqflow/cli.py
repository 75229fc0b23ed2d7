"""The ``pqflow`` command.

Exit codes: 0 run written and every check passed; 1 run written but a check failed (the files
are kept so the failure can be studied); 2 bad input (configuration, output directory), nothing
written.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path
from typing import Annotated, Any, Optional

import typer
from rich.console import Console
from rich.table import Table

from pqflow import CAUTION, __version__
from pqflow.errors import PqflowError

__all__ = ["app", "main"]

app = typer.Typer(
    name="pqflow",
    help=(
        "Real-world and market-consistent economic scenarios from one calibration, with exact "
        "density weights, deflators and martingale tests.\n\n" + CAUTION
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
console = Console()
err_console = Console(stderr=True)


def _fail(exc: Exception) -> None:
    err_console.print(f"[bold red]error:[/] {exc}", highlight=False, soft_wrap=True)
    raise typer.Exit(code=2)


def _verified(run_dir: Path) -> None:
    """Reading a finished run starts with its manifest: a changed or truncated file is named."""
    from pqflow.storage.manifest import verify_run

    verify_run(run_dir)


def _caution() -> None:
    console.print(f"\n[bold yellow]Caution:[/] {CAUTION}", highlight=False)


def _verdict_cell(verdict: str, counts: bool) -> str:
    colour = {"pass": "green", "fail": "red"}.get(verdict, "grey50")
    label = verdict.replace("_", " ").upper()
    return f"[{colour}]{label}[/]" + ("" if counts else " [dim](info)[/]")


def _summary_table(summary: dict[str, Any]) -> Table:
    table = Table(title="Validation of the written files")
    table.add_column("check")
    table.add_column("cells", justify="right")
    table.add_column("outside 95% / chance", justify="right")
    table.add_column("outside 99% / chance", justify="right")
    table.add_column("max |z| / limit", justify="right")
    table.add_column("verdict")
    for name, c in summary["checks"].items():
        counts = bool(c.get("counts_toward_verdict", True))
        if "cells" not in c:
            table.add_row(name.replace("_", " "), "", "", "", "", _verdict_cell(c["verdict"], counts))
            continue
        table.add_row(
            name.replace("_", " "),
            str(c["cells"]),
            f"{c['outside_95']} / {c['expected_outside_95_by_chance']:.1f}",
            f"{c['outside_99']} / {c['expected_outside_99_by_chance']:.1f}",
            f"{c['max_abs_z']:.2f} / {c['family_critical_z']:.2f}",
            _verdict_cell(c["verdict"], counts),
        )
        bench = c.get("wealth_ratio_benchmark")
        if isinstance(bench, dict) and "verdict" in bench:
            table.add_row(
                "  equity wealth ratios vs AAA (2005)",
                str(bench.get("comparisons", "")),
                "", "", f"{bench.get('failed', 0)} missed",
                _verdict_cell(bench["verdict"], bool(bench.get("counts_toward_verdict", False))),
            )
    return table


@app.command()
def run(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    out: Annotated[str, typer.Option("--out", help="Run directory to create: a local path, or a URI pyarrow can open (s3://bucket/prefix).")],
    scenarios: Annotated[Optional[int], typer.Option(help="Scenarios per set (overrides the file).")] = None,
    seed: Annotated[Optional[int], typer.Option(help="Root seed (overrides the file).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace an earlier run in --out once this one succeeds.")] = False,
    workers: Annotated[Optional[int], typer.Option(help="Worker threads generating parts (default: [execution] workers, 2).", min=1, max=64)] = None,
    resume: Annotated[bool, typer.Option("--resume", help="Continue an interrupted run into the same --out: keep its parts whose checksums match, regenerate the rest.")] = False,
    runner: Annotated[Optional[str], typer.Option("--runner", help="Task runner: threads or dask (default: [execution] runner, threads).")] = None,
    dask_address: Annotated[Optional[str], typer.Option("--dask-address", help="Address of a running Dask scheduler (implies --runner dask).")] = None,
    dask_workers: Annotated[Optional[int], typer.Option("--dask-workers", help="Worker processes of the local Dask cluster (default: --workers).", min=1, max=64)] = None,
    calibration: Annotated[Optional[Path], typer.Option("--calibration", help="Use this stored calibration.json (from 'pqflow calibrate') instead of fitting.")] = None,
) -> None:
    """Calibrate, generate the real-world and market-consistent sets, validate, write the manifest."""
    import shutil
    import tempfile

    from pqflow.calibration.assemble import assemble_calibration, check_calibration_fits, load_calibration
    from pqflow.config.loader import apply_overrides, load_config
    from pqflow.storage.filesystem import check_remote_target, resolve_target
    from pqflow.storage.jsonio import write_json_atomic
    from pqflow.storage.rundir import check_target

    started = time.perf_counter()
    try:
        cfg = load_config(config)
        if scenarios is not None or seed is not None:
            cfg = apply_overrides(cfg, scenarios=scenarios, seed=seed, source=str(config))
        from pqflow.jobs.steps import plan_run

        plan_run(cfg)  # grids, batches and density blocks checked before anything is fitted
        # Every input error surfaces here, before Prefect starts; the fitted calibration is then
        # handed to the flow as a file, so it is fitted once.
        if calibration is not None:
            cal = load_calibration(calibration)
            check_calibration_fits(cal, cfg, source=str(calibration))
            calibration_file = calibration
        else:
            cal = assemble_calibration(cfg)
            scratch = Path(tempfile.mkdtemp(prefix="pqflow-calibration-"))
            calibration_file = write_json_atomic(scratch / "calibration.json", cal.to_json())
        target = resolve_target(out)
        if target.is_local:
            check_target(target.local, overwrite)
        else:
            check_remote_target(target, overwrite)
        if runner is not None and runner not in ("threads", "dask"):
            raise PqflowError(f"--runner must be threads or dask, not {runner!r}")
        kind = runner or ("dask" if dask_address else cfg.execution.runner)
        if kind != "dask" and (dask_address or dask_workers):
            raise PqflowError("--dask-address and --dask-workers go with --runner dask")
    except PqflowError as exc:
        _fail(exc)
    sim = cfg.simulation
    console.print(
        f"[bold]pqflow {__version__}[/] run [cyan]{cfg.run.name}[/] valuation date "
        f"{cfg.run.valuation_date}: {sim.scenarios:,} scenarios per set, {sim.horizon_years:g} years, "
        f"{sim.steps_per_year} step{'s' if sim.steps_per_year != 1 else ''} a year, seed {sim.seed}",
        highlight=False,
    )
    console.print(f"starting Prefect (local mode, temporary server), {kind} runner...", style="dim")
    from pipeline import run_quarterly

    try:
        result = run_quarterly(
            config, out, scenarios=scenarios, seed=seed, overwrite=overwrite,
            workers=(dask_workers or workers) if kind == "dask" else workers,
            show_progress=sys.stderr.isatty() or sys.stdout.isatty(),
            resume=resume, runner=kind, dask_address=dask_address, calibration_file=calibration_file,
        )
    except PqflowError as exc:
        _fail(exc)
    finally:
        if calibration is None:
            shutil.rmtree(calibration_file.parent, ignore_errors=True)
    if resume:
        console.print(
            f"resumed: kept {result['kept_parts']} finished parts, regenerated "
            f"{len(result['regenerated_parts'])} damaged or unrecorded ones",
            highlight=False,
        )
    summary = result["summary"]
    console.print(_summary_table(summary))
    console.print(f"rule: {summary['rule']}", style="dim", highlight=False)
    for check in summary["checks"].values():
        for warning in check.get("warnings", []):
            console.print(f"[yellow]warning:[/] {warning}", highlight=False)
    colour = "green" if summary["verdict"] == "pass" else "red"
    console.print(
        f"overall verdict: [{colour}]{summary['verdict'].upper()}[/]; run written to "
        f"{result['out_dir']} in {time.perf_counter() - started:.1f} s",
        highlight=False,
    )
    console.print(
        f"evidence pack: {Path(result['out_dir']) / 'validation' / 'report.html'} (open in a browser)\n"
        f"next: pqflow value {out} --liabilities FILE   (e.g. scenario_configs/demo_liabilities.toml)",
        style="dim", highlight=False,
    )
    _caution()
    if summary["verdict"] != "pass":
        raise typer.Exit(code=1)


@app.command()
def check(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    as_json: Annotated[bool, typer.Option("--json", help="Print every parameter as JSON instead of the summary.")] = False,
) -> None:
    """Validate a configuration and show the parameters and columns it gives, without simulating."""
    from pqflow.calibration.assemble import assemble_calibration
    from pqflow.config.loader import load_config
    from pqflow.jobs.steps import plan_run, written_columns

    try:
        cfg = load_config(config)
        plan = plan_run(cfg)
        cal = assemble_calibration(cfg)
        columns = written_columns(cal, plan)
    except PqflowError as exc:
        _fail(exc)
    import json

    payload = cal.to_json()
    if as_json:
        console.print_json(json.dumps(payload["parameters"]))
    else:
        _print_fit(payload)
        drivers = cal.driver_correlation.names
        console.print(f"drivers ({len(drivers)}): {', '.join(drivers)}", highlight=False)
        if cal.credit is not None:
            corr = "correlated with each other" if cal.credit.correlation is not None else "independent"
            console.print(
                f"credit drivers: {', '.join('credit_' + r for r in cal.credit.names)} ({corr}; independent of the "
                f"drivers above), Euler substeps of at most 1/{cal.credit_substeps_per_year} year",
                highlight=False,
            )
        for measure in ("real_world", "market_consistent"):
            times, batches = plan.times_for(measure), plan.batches_for(measure)
            console.print(
                f"{measure}: {sum(b.size for b in batches):,} scenarios in {len(batches)} parts, "
                f"{times.size - 1} steps to {times[-1]:g} years",
                highlight=False,
            )
        console.print(f"columns ({len(columns) + 1}, with the density): {', '.join(columns)}", highlight=False)
        for b in plan.density_blocks:
            console.print(f"density block {b.name}: drivers {', '.join(b.drivers)} "
                          f"(q_density_{b.name} / p_density_{b.name})", highlight=False, markup=False)
        console.print("(pqflow check --json prints every parameter)", style="dim")
    console.print(f"{config}: valid", style="green")


@app.command()
def calibrate(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML) naming the market-data files.")],
    out: Annotated[Path, typer.Option("--out", help="calibration.json to write.")],
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace an existing file.")] = False,
) -> None:
    """Fit the one shared calibration and write it with its fit report, without simulating.

    Curve (Smith-Wilson), Hull-White to swaptions, index volatilities, inflation and credit
    curves, correlations, market prices of risk.
    """
    from pqflow.calibration.assemble import assemble_calibration
    from pqflow.config.loader import load_config
    from pqflow.storage.jsonio import write_json_atomic

    if out.exists() and not overwrite:
        _fail(PqflowError(f"{out} exists; pass --overwrite to replace it"))
    try:
        cal = assemble_calibration(load_config(config))
    except PqflowError as exc:
        _fail(exc)
    payload = cal.to_json()
    write_json_atomic(out, payload)
    _print_fit(payload)
    console.print(f"calibration written to {out}", style="green")
    _caution()


def _print_heston_fits(fits: dict[str, Any]) -> None:
    """Each Heston index's parameters, Feller ratio and per-quote fit in vol points."""
    for name, h in fits.items():
        p = h["parameters"]
        console.print(
            f"index {name} (Heston): v0 = {p['v0']:.5f}, kappa = {p['kappa']:.4f}, theta = {p['theta']:.5f}, "
            f"xi = {p['xi']:.4f}, rho = {p['rho']:.4f}; Feller ratio 2 kappa theta / xi^2 = {h['feller_ratio']:.3f}"
            f"{' (below 1: the variance reaches zero)' if h['feller_ratio'] < 1 else ''}; smile RMSE "
            f"{h['rmse_vol_points']:.3f} vol points (max {h['max_abs_vol_points']:.3f}); {h['method']}"
            + (f"; at bounds: {', '.join(h['at_bounds'])}" if h["at_bounds"] else ""),
            highlight=False,
        )
        table = Table(title=f"{name}: smile fit (vol points; 1 = 0.01)")
        for col in ("expiry", "K/F", "weight", "market", "model", "model - market"):
            table.add_column(col, justify="right")
        for r in h["rows"]:
            table.add_row(f"{r['expiry']:g}", f"{r['moneyness']:g}", f"{r['weight']:g}", f"{100 * r['market_vol']:.2f}",
                          f"{100 * r['model_vol']:.2f}", f"{r['vol_points']:+.2f}")
        console.print(table)


def _print_fit(payload: dict[str, Any]) -> None:
    fit, par = payload.get("fit", {}), payload["parameters"]
    model = par.get("rates_model", "hull_white")
    rates_fit = fit.get(model, {})
    rmse = f"  (swaption fit RMSE {rates_fit['rmse_bp']:.2f} bp)" if "rmse_bp" in rates_fit else ""
    if model == "g2pp":
        g = par["g2pp"]
        console.print(
            f"G2++: a = {g['a']:.5f}, sigma = {g['sigma']:.5f}, b = {g['b']:.5f}, eta = {g['eta']:.5f}, "
            f"rho = {g['rho']:.4f}{rmse}",
            highlight=False,
        )
    else:
        hw = par["hull_white"]
        console.print(f"Hull-White: a = {hw['mean_reversion']:.5f}, sigma = {hw['volatility']:.5f}{rmse}", highlight=False)
    curve = fit.get("curve", {})
    if "alpha" in curve:
        console.print(
            f"Smith-Wilson: alpha = {curve['alpha']:.6f} (floor {curve['alpha_floor']:g}), forward at the "
            f"convergence point {curve['convergence_point']:g}y = {curve['forward_at_convergence']:.6f} "
            f"vs omega {curve['omega']:.6f} ({curve['gap_to_omega_bp']:+.3f} bp)",
            highlight=False,
        )
    eq = fit.get("equity", {})
    if "bucket_volatilities" in eq:
        buckets = ", ".join(f"{v:.4f}" for v in eq["bucket_volatilities"])
        console.print(f"equity volatility by bucket (ends {eq['bucket_ends']}): {buckets}", highlight=False)
    for item in par.get("indices", []):
        vol = item["volatility"]
        vol_text = f"{vol:.4f}" if isinstance(vol, (int, float)) else ", ".join(f"{v:.4f}" for v in vol["values"])
        console.print(
            f"{item['kind']} index {item['name']}: level {item['level']:g}, income yield {item['income_yield']:.4f}, "
            f"volatility {vol_text}, risk premium {item['risk_premium']:.4f}",
            highlight=False,
        )
    _print_heston_fits(fit.get("heston", {}))
    inf = fit.get("inflation")
    if inf:
        p_inf = par["inflation"]
        console.print(
            f"inflation (Jarrow-Yildirim): real curve from {len(inf['rows'])} zero-coupon inflation swaps, "
            f"max repricing error {inf['max_abs_difference_bp']:.2g} bp; a_r = {p_inf['real_mean_reversion']:g}, "
            f"sigma_r = {p_inf['real_volatility']:g}, sigma_I = {p_inf['inflation_volatility']:g}",
            highlight=False,
        )
        if caps := inf.get("caps"):
            console.print(
                f"  fitted {', '.join(caps['fitted'])} to {len(caps['rows'])} year-on-year caps/floors: "
                f"price RMSE {caps['price_rmse_bp']:.2f} bp of notional",
                highlight=False,
            )
    for r in fit.get("credit", {}).get("ratings", []):
        console.print(
            f"credit {r['rating']}: spreads repriced to {r['max_abs_error_bp']:.2g} bp; CIR++ shift in "
            f"[{r['min_shift']:.4f}, {r['max_shift']:.4f}]; Feller ratio {r['feller_ratio']:.2f}"
            + (f"; fitted {', '.join(r['fitted'])}" if r["fitted"] else "")
            + (f"; real world: theta {r['price_of_risk']:.4g}, long-run level {r['real_world_long_run_mean']:.4g} "
               f"(market consistent {r['market_consistent_long_run_mean']:.4g})" if r.get("price_of_risk") else ""),
            highlight=False,
        )
    corr = fit.get("correlation", {})
    if corr.get("repaired"):
        console.print(f"correlation matrix repaired (Higham 2002), Frobenius distance {corr['frobenius_distance']:.4g}", style="yellow")
    paths = payload.get("expected_short_rate", {})
    if paths:
        target = paths.get("target")
        table = Table(title="Expected short rate by measure (and the house-view target)")
        table.add_column("year", justify="right")
        table.add_column("market-consistent", justify="right")
        table.add_column("real-world", justify="right")
        if target:
            table.add_column(f"house view: {target['quantity']}", justify="right")
            table.add_column("real-world model", justify="right")
        for year in (1.0, 5.0, 10.0, 20.0, 30.0, 50.0):
            if year not in paths["time"]:
                continue
            i = paths["time"].index(year)
            cells = [f"{year:g}", f"{paths['market_consistent'][i]:.4%}", f"{paths['real_world'][i]:.4%}"]
            if target and year in target["time"]:
                j = target["time"].index(year)
                cells += [f"{target['house_view'][j]:.4%}", f"{target['real_world'][j]:.4%}"]
            elif target:
                cells += ["", ""]
            table.add_row(*cells)
        console.print(table)
    if rows := rates_fit.get("rows"):
        table = Table(title="Swaption fit (normal vols in bp)")
        for col in ("expiry", "tenor", "market", "model", "diff bp"):
            table.add_column(col, justify="right")
        for r in rows:
            table.add_row(f"{r['expiry']:g}", f"{r['tenor']:g}", f"{r['market_vol']:.1f}", f"{r['model_vol']:.1f}", f"{r['vol_difference_bp']:+.2f}")
        console.print(table)


_LINE_LABEL = {"unit_linked_gmmb": "unit-linked", "participating": "with-profits", "deferred_annuity_gao": "annuity+GAO"}


@app.command()
def value(
    run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")],
    liabilities: Annotated[Path, typer.Option("--liabilities", help="Liability portfolio file (TOML).")],
    out: Annotated[Optional[Path], typer.Option("--out", help="Folder for the results (default RUN_DIR/valuation).")] = None,
) -> None:
    """Value liabilities with guarantees on both sets: best estimate, TVOG, reconciliation.

    Certainty-equivalent value and TVOG from the market-consistent set, the real-world set with
    deflators beside it, and their difference in standard errors.
    """
    from pqflow.liabilities import value_liabilities_cli

    try:
        _verified(run_dir)
        summary = value_liabilities_cli(run_dir, liabilities, out)
    except PqflowError as exc:
        _fail(exc)
    currency = summary.get("currency", "")
    table = Table(title=f"Liability values, {currency} thousands (real world discounted with deflators)")
    for col in ("line", "", "market consistent", "cert. equiv.", "TVOG", "real world", "diff/SE"):
        table.add_column(col, justify="left" if col in ("line", "quantity") else "right")

    def k(value: float, se: float | None = None) -> str:
        return f"{value / 1e3:,.0f}" + ("" if se is None else f" ± {se / 1e3:,.0f}")

    for line in summary["lines"]:
        if line.get("level") not in ("product", "total"):
            continue
        table.add_row(
            _LINE_LABEL.get(line["name"], line["name"]),
            {"best_estimate": "BE"}.get(line["quantity"], line["quantity"]),
            k(line["market_consistent_value"], line["market_consistent_se"]),
            k(line["certainty_equivalent_value"]), k(line["tvog"]),
            k(line["real_world_value"], line["real_world_se"]),
            f"{line['difference_in_se']:+.2f}",
        )
    console.print(table)
    products: dict[str, list[str]] = {}
    for line in summary["lines"]:
        if line.get("level") == "product" and line.get("quantity") == "best_estimate":
            products.setdefault(str(line.get("real_world_density", "q_density")), []).append(line["name"])
    for density, names in products.items():
        console.print(f"real-world deflators of {', '.join(names)}: {density} / cash_account", highlight=False,
                      markup=False)
    console.print("values and standard errors use control variates from known martingales "
                  "(plain means in the CSV as *_without_controls)", style="dim", highlight=False)
    verdict = summary.get("reconciliation", {}).get("verdict")
    if verdict:
        colour = "green" if verdict == "agree" else "red"
        console.print(f"reconciliation of the two sets: [{colour}]{verdict.upper()}[/]", highlight=False)
    for path in summary.get("files", []):
        console.print(f"written: {path}", style="dim", highlight=False)
    if out is None and (run_dir / "validation" / "summary.json").is_file():
        from pqflow.report import write_report

        console.print(f"report updated: {write_report(run_dir)}", style="dim", highlight=False)
    _caution()
    if verdict == "differ":
        raise typer.Exit(code=1)


@app.command()
def report(run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")]) -> None:
    """Write validation/report.html: one self-contained page with every check and plot."""
    from pqflow.report import write_report

    try:
        _verified(run_dir)
        path = write_report(run_dir)
    except PqflowError as exc:
        _fail(exc)
    console.print(f"report written to {path}", style="green", highlight=False)
    _caution()


def _short(cell: str) -> str:
    """Hashes and run ids shown by their first 12 characters, as git does."""
    text = str(cell)
    if len(text) >= 32 and all(ch in "0123456789abcdef" for ch in text):
        return text[:12]
    return text


@app.command()
def compare(
    run_a: Annotated[Path, typer.Argument(help="The earlier run (e.g. last quarter).")],
    run_b: Annotated[Path, typer.Argument(help="The later run.")],
    html: Annotated[Optional[Path], typer.Option("--html", help="Also write the comparison as an HTML page.")] = None,
    all_rows: Annotated[bool, typer.Option("--all", help="Show unchanged items too.")] = False,
) -> None:
    """What moved between two runs: inputs, parameters, check results, reconciliation values."""
    from pqflow.report import compare_runs, render_compare_text, write_compare_html
    from pqflow.report.compare import COMPARE_COLUMNS

    try:
        _verified(run_a)
        _verified(run_b)
        comparison = compare_runs(run_a, run_b)
    except PqflowError as exc:
        _fail(exc)
    table = Table(title=f"{run_a} -> {run_b}")
    for col in COMPARE_COLUMNS:
        table.add_column(col, overflow="fold")
    shown = 0
    for row in render_compare_text(comparison):
        if all_rows or (row[-1] not in ("", "unchanged", "=")):
            table.add_row(*(_short(cell) for cell in row))
            shown += 1
    console.print(table if shown else "no differences in inputs, parameters, checks or reconciliation")
    if html is not None:
        path = write_compare_html(comparison, html)
        console.print(f"comparison page written to {path}", style="green", highlight=False)
    _caution()


@app.command()
def verify(run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")]) -> None:
    """Check every file of a run against its manifest (sizes and sha256)."""
    from pqflow.storage.manifest import verify_run

    try:
        manifest = verify_run(run_dir)
    except PqflowError as exc:
        _fail(exc)
    console.print(f"{run_dir}: {len(manifest['files'])} files match manifest.json", style="green")


@app.command()
def version() -> None:
    """Print the version."""
    console.print(__version__)


@app.command()
def export(
    run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")],
    measure: Annotated[str, typer.Option("--measure", help="real_world or market_consistent.")],
    fmt: Annotated[str, typer.Option("--format", help="csv or parquet.")] = "csv",
    columns: Annotated[Optional[str], typer.Option("--columns", help="Comma-separated columns (default: all); scenario and time always come first.")] = None,
    scenarios: Annotated[Optional[str], typer.Option("--scenarios", help="Scenarios FIRST:STOP (FIRST to STOP-1, e.g. 0:100); default all.")] = None,
    out: Annotated[Optional[Path], typer.Option("--out", help="File to write (default: CSV on standard output).")] = None,
) -> None:
    """Stream a slice of one scenario set to CSV or Parquet, checking each part read against the manifest."""
    from pqflow.storage.export import export_slice

    cols = [c.strip() for c in columns.split(",") if c.strip()] if columns else None
    try:
        result = export_slice(run_dir, measure=measure, fmt=fmt, columns=cols, scenarios=scenarios, out=out)
    except PqflowError as exc:
        _fail(exc)
    if out is not None:
        console.print(
            f"{result.rows:,} rows of scenarios {result.first_scenario}..{result.stop_scenario - 1} "
            f"({', '.join(result.columns)}) written to {out}; units in {out}.meta.json",
            highlight=False,
        )


def main() -> None:
    app()


if __name__ == "__main__":
    main()
