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


def _caution() -> None:
    console.print(f"\n[bold yellow]Caution:[/] {CAUTION}", highlight=False)


def _summary_table(summary: dict[str, Any]) -> Table:
    table = Table(title="Validation of the written files")
    table.add_column("check")
    table.add_column("cells", justify="right")
    table.add_column("outside 95% / chance", justify="right")
    table.add_column("outside 99% / chance", justify="right")
    table.add_column("max |z| / limit", justify="right")
    table.add_column("verdict")
    for name, c in summary["checks"].items():
        colour = "green" if c["verdict"] == "pass" else "red"
        table.add_row(
            name.replace("_", " "),
            str(c["cells"]),
            f"{c['outside_95']} / {c['expected_outside_95_by_chance']:.1f}",
            f"{c['outside_99']} / {c['expected_outside_99_by_chance']:.1f}",
            f"{c['max_abs_z']:.2f} / {c['family_critical_z']:.2f}",
            f"[{colour}]{c['verdict'].upper()}[/]",
        )
    return table


@app.command()
def run(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    out: Annotated[Path, typer.Option("--out", help="Run directory to create.")],
    scenarios: Annotated[Optional[int], typer.Option(help="Scenarios per set (overrides the file).")] = None,
    seed: Annotated[Optional[int], typer.Option(help="Root seed (overrides the file).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace an earlier run in --out once this one succeeds.")] = False,
    workers: Annotated[int, typer.Option(help="Worker threads generating parts.", min=1, max=64)] = 2,
) -> None:
    """Calibrate, generate the real-world and market-consistent sets, validate, write the manifest."""
    from pqflow.calibration.assemble import assemble_calibration
    from pqflow.config.loader import apply_overrides, load_config
    from pqflow.storage.rundir import _check_target

    started = time.perf_counter()
    try:
        cfg = load_config(config)
        if scenarios is not None or seed is not None:
            cfg = apply_overrides(cfg, scenarios=scenarios, seed=seed, source=str(config))
        assemble_calibration(cfg)  # every input error surfaces here, before Prefect starts
        _check_target(out.absolute(), overwrite)
    except PqflowError as exc:
        _fail(exc)
    sim = cfg.simulation
    console.print(
        f"[bold]pqflow {__version__}[/] run [cyan]{cfg.run.name}[/] valuation date "
        f"{cfg.run.valuation_date}: {sim.scenarios:,} scenarios per set, {sim.horizon_years:g} years, "
        f"{sim.steps_per_year} steps a year, seed {sim.seed}",
        highlight=False,
    )
    console.print("starting Prefect (local mode, temporary server)...", style="dim")
    from pipeline import run_quarterly

    try:
        result = run_quarterly(
            config, out, scenarios=scenarios, seed=seed, overwrite=overwrite, workers=workers,
            show_progress=sys.stderr.isatty() or sys.stdout.isatty(),
        )
    except PqflowError as exc:
        _fail(exc)
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
    _caution()
    if summary["verdict"] != "pass":
        raise typer.Exit(code=1)


@app.command()
def check(config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")]) -> None:
    """Validate a configuration and show the parameters it gives, without simulating."""
    from pqflow.calibration.assemble import assemble_calibration
    from pqflow.config.loader import load_config

    try:
        cal = assemble_calibration(load_config(config))
    except PqflowError as exc:
        _fail(exc)
    import json

    console.print_json(json.dumps(cal.to_json()["parameters"]))
    console.print(f"{config}: valid", style="green")


@app.command()
def calibrate(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML) naming the market-data files.")],
    out: Annotated[Path, typer.Option("--out", help="calibration.json to write.")],
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace an existing file.")] = False,
) -> None:
    """Fit the one shared calibration (curve, Hull-White, equity volatility, prices of risk) and
    write it with its fit report, without simulating."""
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


def _print_fit(payload: dict[str, Any]) -> None:
    fit, par = payload.get("fit", {}), payload["parameters"]
    hw = par["hull_white"]
    console.print(
        f"Hull-White: a = {hw['mean_reversion']:.5f}, sigma = {hw['volatility']:.5f}"
        + (f"  (swaption fit RMSE {fit['hull_white']['rmse_bp']:.2f} bp)" if "rmse_bp" in fit.get("hull_white", {}) else ""),
        highlight=False,
    )
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
    if rows := fit.get("hull_white", {}).get("rows"):
        table = Table(title="Swaption fit (normal vols in bp)")
        for col in ("expiry", "tenor", "market", "model", "diff bp"):
            table.add_column(col, justify="right")
        for r in rows:
            table.add_row(f"{r['expiry']:g}", f"{r['tenor']:g}", f"{r['market_vol']:.1f}", f"{r['model_vol']:.1f}", f"{r['vol_difference_bp']:+.2f}")
        console.print(table)


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


def main() -> None:
    app()


if __name__ == "__main__":
    main()
