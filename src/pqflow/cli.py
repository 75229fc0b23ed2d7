"""The ``pqflow`` command.

Exit codes: 0 run written and no check failed (checks that are inconclusive, i.e. lack the
power to see a material deviation, are counted and printed, not failed); 1 run written but a
check failed (the files are kept so the failure can be studied); 2 bad input (configuration,
output directory), nothing written; 3 runtime fault (disk full, permissions); 130 interrupted
(143 on SIGTERM). See ``pqflow/cli_errors.py``.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer
from rich.console import Console
from rich.markup import escape
from rich.table import Table
from rich.text import Text

from pqflow import CAUTION, __version__
from pqflow.cli_errors import (
    error_line,
    exit_code_for,
    guarded,
    interrupt_exit_code,
    message_for,
    terminate_as_interrupt,
)
from pqflow.errors import PqflowError
from pqflow.report import numbers as fmt
from pqflow.storage.names import density_column
from pqflow.storage.validation_summary import (
    CheckSummary,
    ValidationSummary,
    check_counts_toward_verdict,
    validation_summary_from_json,
)
from pqflow.storage.valuation_summary import valuation_summary_from_json

if TYPE_CHECKING:
    from pqflow.storage.calibration_file import CalibrationRecord
    from pqflow.storage.calibration_sections import CurveFitRecord, HestonFitRecord

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
PIPED_WIDTH = 200  # columns of output that is not a terminal (a log, a pipe), unless COLUMNS says



def _register_part_kinds() -> None:
    """The shipped part kinds (:mod:`pqflow.calibration.part_kinds`), registered before a
    configuration is read (a ``[parts.<name>]`` section of a shipped kind must validate); the
    import stays inside the commands that read one, so that ``pqflow --version`` stays quick."""
    import pqflow.calibration.part_kinds  # noqa: F401

def _fit_width() -> None:
    """Rich draws to 80 columns when output is not a terminal and truncates table cells to fit;
    a log gets PIPED_WIDTH columns instead (COLUMNS, if set, still decides)."""
    import os

    for con in (console, err_console):
        con.width = None  # type: ignore[assignment]  # rich types width as int; None: back to detection
        if not con.is_terminal and not os.environ.get("COLUMNS"):
            con.width = PIPED_WIDTH


def _version_option(value: bool) -> None:
    if value:
        console.print(__version__, highlight=False)
        raise typer.Exit()


@app.callback()
def _main(
    version: Annotated[
        bool | None,
        typer.Option("--version", help="Print the version and exit.", callback=_version_option, is_eager=True),
    ] = None,
) -> None:
    _fit_width()


def _fail(exc: Exception) -> None:
    err_console.print(error_line(message_for(exc)), highlight=False, soft_wrap=True)
    raise typer.Exit(code=exit_code_for(exc))


def _verified(run_dir: Path, *, valuation: bool = True) -> None:
    """Reading a finished run starts with its manifest: a changed or truncated file is named;
    so are changed valuation results (``valuation/manifest.json``) unless ``valuation`` is off."""
    from pqflow.storage.manifest import verify_run
    from pqflow.storage.valuation_files import verify_valuation

    verify_run(run_dir)
    if valuation:
        verify_valuation(run_dir)


def _caution() -> None:
    console.print(f"\n[bold yellow]Caution:[/] {CAUTION}", highlight=False)


def _verdict_cell(verdict: str, counts: bool) -> str:
    """Three states (pass green, inconclusive amber, fail red); a reported-only result says
    whether it was met, in one word, without a red FAIL."""
    if not counts:
        return "[dim]info: " + {"pass": "met", "fail": "missed"}.get(verdict, verdict.replace("_", " ")) + "[/]"
    colour = {"pass": "green", "fail": "red", "inconclusive": "dark_orange"}.get(verdict, "grey50")
    label = verdict.replace("_", " ").upper()
    return f"[{colour}]{label}[/]"


def _summary_table(summary: ValidationSummary) -> Table:
    table = Table(title="Validation of the written files")
    table.add_column("check")
    table.add_column("cells", justify="right")
    table.add_column("outside 95% / chance", justify="right")
    table.add_column("outside 99% / chance", justify="right")
    table.add_column("max |z| / limit", justify="right")
    table.add_column("inconclusive", justify="right")
    table.add_column("verdict")
    for name, c in summary.checks.items():
        counts = c.counts_toward_verdict
        if c.cells is None:
            table.add_row(name.replace("_", " "), "", "", "", "", "", _verdict_cell(c.verdict or "", counts))
            continue
        table.add_row(
            name.replace("_", " "),
            fmt.count(c.cells),
            f"{fmt.count(c.outside_95)} / {fmt.number(c.expected_outside_95_by_chance, 3)}",
            f"{fmt.count(c.outside_99)} / {fmt.number(c.expected_outside_99_by_chance, 3)}",
            f"{fmt.zscore(c.max_abs_z)} / {fmt.zscore(c.family_critical_z)}",
            _inconclusive_cell(c),
            _verdict_cell(c.verdict or "", counts),
        )
        bench = c.wealth_ratio_benchmark
        if isinstance(bench, dict) and "verdict" in bench:
            table.add_row(
                "  equity wealth ratios vs AAA (2005)",
                str(bench.get("comparisons", "")),
                "", "", f"{bench.get('failed', 0)} missed", "",
                _verdict_cell(bench["verdict"], check_counts_toward_verdict(bench, default=False)),
            )
    return table


def _inconclusive_cell(c: CheckSummary) -> str:
    n = int(c.inconclusive_cells or 0)
    if not n:
        return ""
    start = c.inconclusive_from_time
    return f"{n}" + (f" from {start:g}y" if start is not None else "")


def _density_table(densities: list[Mapping[str, Any]]) -> Table:
    """One row per written density: where its effective sample size stays usable, and its
    state at the horizon (the full density first in each set, then its restricted blocks)."""
    table = Table(title="Density weights: usable horizon (ESS share above the warning level)")
    table.add_column("set")
    table.add_column("density", overflow="fold")
    table.add_column("usable to", justify="right")
    table.add_column("ESS share (horizon)", justify="right")
    table.add_column("largest weight (horizon)", justify="right")
    for d in densities:
        horizon = d.get("usable_horizon")
        table.add_row(
            escape(str(d["measure"]).replace("_", "-")),
            escape(str(d["column"])),
            "the horizon" if horizon is None else f"{horizon:g} years",
            f"{d['ess_share_at_horizon']:.3f}",
            f"{d['max_weight_share_at_horizon']:.1%}",
        )
    return table


def _print_validation(result: dict[str, Any]) -> ValidationSummary:
    """The verdict table, the rule, each density's usable horizon, the density budget at the
    horizon, the warnings and the inconclusive cells (values escaped: rich would take text in
    brackets for markup). ``result``: the summary as the run or ``validate`` wrote it."""
    summary = validation_summary_from_json(result)
    console.print(_summary_table(summary))
    console.print(f"rule: {escape(str(summary.rule))}", style="dim", highlight=False)
    densities = list(summary.densities or [])
    if densities:
        console.print(_density_table(densities))
    for measure, shares in (summary.density_budget or {}).items():
        if shares:
            parts = ", ".join(f"{escape(k)} {v:.0%}" for k, v in sorted(shares.items(), key=lambda kv: -abs(kv[1])))
            console.print(f"density budget at the horizon, {escape(measure)} (share of log-density variance): {parts}",
                          highlight=False)
    for check in summary.checks.values():
        for warning in check.warnings:
            console.print(f"[yellow]warning:[/] {escape(str(warning))}", highlight=False)
    inc = summary.inconclusive
    if inc is not None and inc.cells:
        start = inc.from_time
        console.print(
            f"[yellow]inconclusive:[/] {inc.cells} cells in {', '.join(escape(c) for c in inc.checks)} "
            + (f"from t = {start:g} {'year' if start == 1 else 'years'} " if start is not None else "")
            + "could not detect a material deviation with 50% power (more scenarios or a restricted "
            "density would make them conclusive)",
            highlight=False,
        )
    return summary


def _verdict_line(verdict: str) -> str:
    colour = {"pass": "green", "inconclusive": "yellow"}.get(verdict, "red")
    return f"[{colour}]{verdict.upper()}[/]"


@app.command()
@guarded(err_console)
def run(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    out: Annotated[str, typer.Option("--out", help="Run directory to create: a local path, or a URI pyarrow can open (s3://bucket/prefix).")],
    scenarios: Annotated[int | None, typer.Option(help="Scenarios per set (overrides the file).")] = None,
    seed: Annotated[int | None, typer.Option(help="Root seed (overrides the file).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite",
                                            help="Replace an earlier run in --out once this one succeeds.")] = False,
    workers: Annotated[int | None,
                       typer.Option(help="Worker threads generating parts (default: the configuration's \\[execution] "
                                         "workers, else 2).", min=1, max=64)] = None,
    resume: Annotated[bool, typer.Option("--resume",
                                         help="Continue an interrupted run into the same --out: keep its parts whose "
                                              "checksums match, regenerate the rest.")] = False,
    runner: Annotated[str | None, typer.Option("--runner",
                                               help="Task runner: threads or dask (default: the configuration's "
                                                    "\\[execution] runner, else threads).")] = None,
    dask_address: Annotated[str | None, typer.Option("--dask-address",
                                                     help="Address of a running Dask scheduler (implies --runner "
                                                          "dask).")] = None,
    dask_workers: Annotated[int | None, typer.Option("--dask-workers",
                                                     help="Worker processes of the local Dask cluster (default: "
                                                          "--workers).", min=1, max=64)] = None,
    calibration: Annotated[Path | None, typer.Option("--calibration",
                                                     help="Use this stored calibration.json (from 'pqflow calibrate') "
                                                          "instead of fitting.")] = None,
) -> None:
    """Calibrate, generate the real-world and market-consistent sets, validate, write the manifest."""
    import os
    import shlex
    import shutil

    # Prefect's own console lines (a failed task's traceback, retries) stay in its API log;
    # the terminal gets one error line from pqflow instead.
    os.environ.setdefault("PREFECT_LOGGING_HANDLERS_CONSOLE_LEVEL", "CRITICAL")
    import tempfile

    from pqflow.calibration.assemble import assemble_calibration, check_calibration_fits, load_calibration
    from pqflow.config.loader import apply_overrides, load_config
    _register_part_kinds()
    from pqflow.jobs.steps import plan_run
    from pqflow.pipeline.home import check_prefect_home
    from pqflow.storage.calibration_file import calibration_path, write_calibration_file
    from pqflow.storage.filesystem import check_remote_target, resolve_target, target_lock_path
    from pqflow.storage.rundir import acquire_lock, check_target, release_lock

    started = time.perf_counter()
    lock = None
    try:
        cfg = load_config(config)
        if scenarios is not None or seed is not None:
            cfg = apply_overrides(cfg, scenarios=scenarios, seed=seed, source=str(config))
        plan_run(cfg)  # grids, batches and density blocks checked before anything is fitted
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
        from pqflow.pipeline.deployments import api_url, check_server

        check_prefect_home()
        server = api_url()
        if server:
            check_server(server)  # a configured server that does not answer: exit 2 before any work
        # The target is locked before any work (calibration, Prefect's server): a second run
        # into a busy --out is refused at once. The flow takes the same lock again.
        lock = acquire_lock(target_lock_path(target), target=target.text, reentrant=True)
        # Every input error surfaces here, before Prefect starts; the fitted calibration is then
        # handed to the flow as a file, so it is fitted once.
        if calibration is not None:
            cal = load_calibration(calibration)
            check_calibration_fits(cal, cfg, source=str(calibration))
            calibration_file = calibration
        else:
            cal = assemble_calibration(cfg)
            if cfg.sensitivities:
                from pqflow.jobs.sensitivities import check_sensitivity_inputs

                check_sensitivity_inputs(cfg, source=str(config))
            scratch = Path(tempfile.mkdtemp(prefix="pqflow-calibration-"))
            try:
                calibration_file = write_calibration_file(calibration_path(scratch), cal.to_json())
            except BaseException:
                shutil.rmtree(scratch, ignore_errors=True)
                raise
    except (PqflowError, OSError) as exc:
        if lock is not None:
            release_lock(lock)
        _fail(exc)
    except BaseException:
        if lock is not None:
            release_lock(lock)
        raise
    sim = cfg.simulation
    try:
        console.print(
            f"[bold]pqflow {__version__}[/] run [cyan]{escape(cfg.run.name)}[/] valuation date "
            f"{cfg.run.valuation_date}: {sim.scenarios:,} scenarios per set, {sim.horizon_years:g} years, "
            f"{sim.steps_per_year} step{'s' if sim.steps_per_year != 1 else ''} a year, seed {sim.seed}",
            highlight=False,
        )
        where = f"the Prefect server at {server}" if server else "Prefect in local mode (temporary server)"
        console.print(f"starting the flow on {where}, {kind} runner...", style="dim", highlight=False, markup=False)
        from pqflow.pipeline import run_quarterly

        with terminate_as_interrupt():
            result = run_quarterly(
                config, out, scenarios=scenarios, seed=seed, overwrite=overwrite,
                workers=(dask_workers or workers) if kind == "dask" else workers,
                show_progress=True,  # a bar on a terminal, a line every few seconds in a log
                resume=resume, runner=kind, dask_address=dask_address, calibration_file=calibration_file,
            )
    except (PqflowError, OSError) as exc:
        _fail(exc)
    except KeyboardInterrupt:
        again = {"--scenarios": scenarios, "--seed": seed, "--calibration": calibration, "--runner": runner,
                 "--workers": workers, "--dask-address": dask_address, "--dask-workers": dask_workers}
        _interrupted(target, [str(config), "--out", out,
                              *(t for k, v in again.items() if v is not None for t in (k, str(v))),
                              *(["--overwrite"] if overwrite else [])])
    finally:
        if calibration is None:
            shutil.rmtree(calibration_file.parent, ignore_errors=True)
        if lock is not None:  # taken before this block
            release_lock(lock)
    if resume:
        console.print(_resume_line(result), highlight=False, markup=False)
    summary = _print_validation(result["summary"])
    for name, sens in (summary.sensitivities or {}).items():
        console.print(
            f"sensitivity {escape(name)}: {_verdict_cell(sens['verdict'], True)} ({escape(str(sens['summary']))})",
            highlight=False,
        )
    console.print(
        f"overall verdict: {_verdict_line(summary.verdict)}; run written to "
        f"{escape(str(result['out_dir']))} in {time.perf_counter() - started:.1f} s",
        highlight=False,
    )
    console.print(
        f"evidence pack: {Path(result['out_dir']) / 'validation' / 'report.html'} (open in a browser)\n"
        f"next: {_self_command()} value {shlex.quote(str(result['out_dir']))} --liabilities FILE   "
        "(e.g. scenario_configs/demo_liabilities.toml)",
        style="dim", highlight=False, markup=False, soft_wrap=True,
    )
    _caution()
    if summary.verdict == "fail":
        raise typer.Exit(code=1)


def _interrupted(target: Any, arguments: list[str]) -> None:
    """Ctrl-C or SIGTERM during a run: the lock is released, the finished parts are kept."""
    import logging
    import shlex

    from pqflow.storage.rundir import staging_path

    # Log lines still queued for the stopped temporary server are dropped without a message.
    logging.raiseExceptions = False

    where = staging_path(target.local) if target.is_local else "the local staging folder"
    err_console.print(
        error_line(
            f"interrupted; the earlier output is untouched and the finished parts are kept in {where}. "
            f"To continue, run: {shlex.join(['pqflow', 'run', *arguments, '--resume'])}"
        ),
        highlight=False, soft_wrap=True,
    )
    raise typer.Exit(code=interrupt_exit_code())




@app.command()
@guarded(err_console)
def validate(
    run_dir: Annotated[Path, typer.Argument(help="A finished run directory (e.g. copied or exported).")],
    ess_warning_share: Annotated[float | None, typer.Option("--ess-warning-share",
                                                            help="Effective sample size share below which a density is "
                                                                 "past its usable horizon (default: the run's own, "
                                                                 "else 0.10).", min=0.0, max=1.0)] = None,
) -> None:
    """Re-run every check from the files: manifest first, then the checks, then a fresh validation/.

    The earlier validation/ stays whole if anything fails; the report, if present, is rendered
    again. Exit code 0 when no check fails (inconclusive cells are printed), 1 when one fails.
    """
    from pqflow.jobs.steps import revalidate_run

    try:
        summary = revalidate_run(run_dir, ess_warning_share=ess_warning_share)
    except PqflowError as exc:
        _fail(exc)
    record = _print_validation(summary)
    if (run_dir / "validation" / "report.html").is_file():
        from pqflow.report import write_report

        console.print(f"report updated: {escape(str(write_report(run_dir)))}", style="dim", highlight=False)
    console.print(f"overall verdict: {_verdict_line(record.verdict)}; validation/ rewritten in "
                  f"{escape(str(run_dir))}", highlight=False)
    _caution()
    if record.verdict == "fail":
        raise typer.Exit(code=1)


def _resume_line(result: dict[str, Any]) -> str:
    kept, generated = result["kept_parts"], len(result["regenerated_parts"])
    line = f"resumed: kept {kept} finished parts, regenerated {generated} (of {kept + generated})"
    if discarded := result.get("discarded_parts"):
        line += f"; {len(discarded)} damaged or unrecorded part files were discarded"
    return line


def _self_command() -> str:
    """How to call this same pqflow from a fresh shell: ``pqflow`` when that name on PATH is this
    executable, else its absolute path (e.g. /path/to/project/.venv/bin/pqflow)."""
    import shlex
    import shutil

    argv0 = Path(sys.argv[0])
    if argv0.name == "pqflow" and argv0.is_file():
        used = argv0.absolute()
    else:  # python -m pqflow.cli, or a test runner: the script installed beside this Python
        used = Path(sys.executable).parent / "pqflow"
        if not used.is_file():
            return f"{shlex.quote(sys.executable)} -m pqflow.cli"
    on_path = shutil.which("pqflow")
    if on_path and Path(on_path).resolve() == used.resolve():
        return "pqflow"
    return shlex.quote(str(used))



@app.command()
@guarded(err_console)
def check(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML).")],
    as_json: Annotated[bool, typer.Option("--json",
                                          help="Print every parameter as JSON instead of the summary.")] = False,
) -> None:
    """Validate a configuration and show the parameters and columns it gives, without simulating."""
    from pqflow.calibration.assemble import assemble_calibration
    from pqflow.config.loader import load_config
    _register_part_kinds()
    from pqflow.jobs.steps import plan_run, written_columns

    try:
        cfg = load_config(config)
        plan = plan_run(cfg)
        cal = assemble_calibration(cfg)
        columns = written_columns(cal, plan)
    except PqflowError as exc:
        _fail(exc)
    import json

    from pqflow.storage.calibration_file import calibration_record

    record = calibration_record(cal.to_json(), "the calibration")
    if as_json:  # only the JSON on standard output, so it can be piped into a parser
        sys.stdout.write(json.dumps(record.parameters, indent=2) + "\n")
        return
    else:
        _print_fit(record)
        drivers = cal.driver_correlation.names
        console.print(Text(f"drivers ({len(drivers)}): {', '.join(drivers)}"), highlight=False)
        if cfg.parts:
            from pqflow.models.parts import describe_part

            for name, section in cfg.parts.items():
                console.print(Text(f"part {name}: {describe_part(name, section)}"), highlight=False)
        if cal.credit is not None:
            corr = "correlated with each other" if cal.credit.correlation is not None else "independent"
            console.print(
                Text(f"credit drivers: {', '.join('credit_' + r for r in cal.credit.names)} ({corr}; independent of "
                     f"the "
                     f"drivers above), Euler substeps of at most 1/{cal.credit_substeps_per_year} year"),
                highlight=False,
            )
        for measure in ("real_world", "market_consistent"):
            times, batches = plan.times_for(measure), plan.batches_for(measure)
            console.print(
                f"{measure}: {sum(b.size for b in batches):,} scenarios in {len(batches)} parts, "
                f"{times.size - 1} steps to {times[-1]:g} years",
                highlight=False,
            )
        console.print(Text(f"columns ({len(columns) + 1}, with the density): {', '.join(columns)}"), highlight=False)
        for b in plan.density_blocks:
            console.print(f"density block {b.name}: drivers {', '.join(b.drivers)} "
                          f"(q_density_{b.name} / p_density_{b.name})", highlight=False, markup=False)
        console.print("(pqflow check --json prints every parameter)", style="dim")
    console.print(Text(f"{config}: valid", style="green"))


@app.command()
@guarded(err_console)
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
    _register_part_kinds()
    from pqflow.storage.calibration_file import calibration_record, write_calibration_file

    if out.exists() and not overwrite:
        _fail(PqflowError(f"{out} exists; pass --overwrite to replace it"))
    try:
        cal = assemble_calibration(load_config(config))
    except PqflowError as exc:
        _fail(exc)
    payload = cal.to_json()
    write_calibration_file(out, payload)
    _print_fit(calibration_record(payload, out))
    console.print(Text(f"calibration written to {out}", style="green"))
    _caution()


def _print_heston_fits(fits: dict[str, HestonFitRecord]) -> None:
    """Each Heston index's parameters, Feller ratio and per-quote fit in vol points."""
    for name, h in fits.items():
        console.print(
            f"index {name} (Heston): v0 = {h.v0:.5f}, kappa = {h.kappa:.4f}, theta = {h.theta:.5f}, "
            f"xi = {h.xi:.4f}, rho = {h.rho:.4f}; Feller ratio 2 kappa theta / xi^2 = {h.feller_ratio:.3f}"
            f"{' (below 1: the variance reaches zero)' if h.feller_ratio < 1 else ''}; smile RMSE "
            f"{h.rmse_vol_points:.3f} vol points (max {h.max_abs_vol_points:.3f}); {h.method}"
            + (f"; at bounds: {', '.join(h.at_bounds)}" if h.at_bounds else ""),
            highlight=False,
        )
        table = Table(title=f"{name}: smile fit (vol points; 1 = 0.01)")
        for col in ("expiry", "K/F", "weight", "market", "model", "model - market"):
            table.add_column(col, justify="right")
        for r in h.rows:
            diff = r.vol_points if r.vol_points is not None else 100.0 * (r.model_vol - r.market_vol)
            table.add_row(f"{r.expiry:g}", f"{r.moneyness:g}", "" if r.weight is None else f"{r.weight:g}",
                          f"{100 * r.market_vol:.2f}", f"{100 * r.model_vol:.2f}", f"{diff:+.2f}")
        console.print(table)


def _print_fit(record: CalibrationRecord) -> None:
    model = record.rates_model
    rates_fit = record.rates_fit
    rmse = f"  (swaption fit RMSE {fmt.bp(rates_fit.rmse_bp, 2)} normal vol)" if rates_fit.rmse_bp is not None else ""
    g, hw = record.g2pp, record.hull_white
    if model == "g2pp" and g is not None:
        console.print(
            f"G2++: a = {fmt.plain(g.a)}, sigma = {fmt.bp(1e4 * g.sigma)}, b = {fmt.plain(g.b)}, "
            f"eta = {fmt.bp(1e4 * g.eta)}, rho = {fmt.plain(g.rho)}{rmse}",
            highlight=False,
        )
    elif hw is not None:
        console.print(f"Hull-White: a = {fmt.plain(hw.mean_reversion)}, sigma = {fmt.bp(1e4 * hw.volatility)} "
                      f"(normal){rmse}", highlight=False)
    _print_curve_fit(record.curve_fit)
    eq = record.part_fit("equity")
    if "bucket_volatilities" in eq:
        buckets = ", ".join(fmt.vol_points(v) for v in eq["bucket_volatilities"])
        ends = ", ".join(fmt.years(t) for t in eq["bucket_ends"])
        console.print(f"equity volatility by bucket (ends {ends} years), points: {buckets}", highlight=False)
    for item in record.further_indices:
        vol = item.volatility
        vol_text = (fmt.vol_points(vol) if isinstance(vol, (int, float))
                    else ", ".join(fmt.vol_points(v) for v in vol["values"])) + " pts"
        console.print(
            f"{item.kind} index {escape(item.name)}: level {fmt.plain(item.level, 6)}, income yield "
            f"{fmt.percent(item.income_yield, 2)}, volatility {vol_text}, risk premium "
            f"{fmt.percent(item.risk_premium, 2)}",
            highlight=False,
        )
    _print_heston_fits(record.heston_fits)
    from pqflow.models.parts import PART_KINDS, part_fit_key, part_fit_lines, part_fit_text, recorded_parts

    for _, legacy, entry in recorded_parts(record.parameters, {}):  # kinds with an entry of their own (inflation)
        for line in part_fit_lines(legacy, entry, record.part_fit(part_fit_key(legacy)), fmt):
            console.print(line, highlight=False)
    for r in record.credit_fit.ratings:
        console.print(
            f"credit {escape(r.rating)}: spreads repriced to {fmt.bp(r.max_abs_error_bp, 2)}; CIR++ shift "
            f"in "
            f"[{fmt.percent(r.min_shift)}, {fmt.percent(r.max_shift)}]; Feller ratio {r.feller_ratio:.2f}"
            + (f"; fitted {', '.join(r.fitted)}" if r.fitted else "")
            + (f"; real world: theta {fmt.plain(r.price_of_risk)}, long-run level "
               f"{fmt.percent(r.real_world_long_run_mean)} "
               f"(market consistent {fmt.percent(r.market_consistent_long_run_mean)})" if r.price_of_risk
               else ""),
            highlight=False,
        )
    for name in record.plugin_parts:  # a part plug-in its kind fitted: the kind's own words
        if (kind := PART_KINDS.get(name)) is not None and (text := part_fit_text(kind, record.part_fit(
                part_fit_key(kind)), fmt)):
            console.print(Text(f"part {name}: {text}"), highlight=False)
    corr = record.correlation_fit
    if corr.repaired:
        console.print("correlation matrix repaired (Higham 2002), Frobenius distance "
                      f"{fmt.number(corr.frobenius_distance)}", style="yellow")
    paths = record.expected_short_rate
    if paths is not None:
        target = paths.target
        table = Table(title="Expected short rate by measure (and the house-view target)")
        table.add_column("year", justify="right")
        table.add_column("market-consistent", justify="right")
        table.add_column("real-world", justify="right")
        if target:
            table.add_column(f"house view: {target.quantity}", justify="right")
            table.add_column("real-world model", justify="right")
        for year in (1.0, 5.0, 10.0, 20.0, 30.0, 50.0):
            if year not in paths.time:
                continue
            i = paths.time.index(year)
            cells = [f"{year:g}", fmt.percent(paths.market_consistent[i]), fmt.percent(paths.real_world[i])]
            if target and year in target.time:
                j = target.time.index(year)
                cells += [fmt.percent(target.house_view[j]), fmt.percent(target.real_world[j])]
            elif target:
                cells += ["", ""]
            table.add_row(*cells)
        console.print(table)
    if swaptions := rates_fit.swaptions:
        table = Table(title="Swaption fit (normal vols in bp)")
        for col in ("expiry", "tenor", "market", "model", "diff bp"):
            table.add_column(col, justify="right")
        for sw in swaptions:
            table.add_row(fmt.years(sw.expiry), fmt.years(sw.tenor), fmt.bp(sw.market_vol),
                          fmt.bp(sw.model_vol),
                          fmt.bp(sw.vol_difference_bp, 2, sign=True))
        console.print(table)


def _print_curve_fit(curve: CurveFitRecord) -> None:
    if curve.is_last_liquid_forward:
        freq = f", coupon frequency {curve.coupon_frequency}" if curve.coupon_frequency else ""
        console.print(
            f"last liquid forward (Solvency II review): {curve.input_kind} inputs ({curve.inputs_used}){freq}, "
            f"CRA {_fit_value(curve.credit_risk_adjustment_bp):g} bp; first smoothing point "
            f"{_fit_value(curve.first_smoothing_point):g}y, "
            f"LLFR {_fit_value(curve.last_liquid_forward_rate):.6%} (continuous), UFR {_fit_value(curve.ufr):.4%} "
            f"(omega {_fit_value(curve.omega):.6%}), alpha = {_fit_value(curve.alpha):g} ({curve.alpha_source})",
            highlight=False,
        )
        terms = ", ".join(
            f"{t.weight:g} x f({t.forward_from:g},{t.maturity:g}) = {t.forward:.5%}"
            for t in curve.llfr_terms
        )
        console.print(f"  LLFR = {terms}", highlight=False)
    elif curve.alpha is not None:
        console.print(
            f"Smith-Wilson: alpha = {curve.alpha:.6f} (floor {_fit_value(curve.alpha_floor):g}), forward at the "
            f"convergence point {_fit_value(curve.convergence_point):g}y = "
            f"{_fit_value(curve.forward_at_convergence):.6f} "
            f"vs omega {_fit_value(curve.omega):.6f} ({_fit_value(curve.gap_to_omega_bp):+.3f} bp)",
            highlight=False,
        )
    elif curve.method:
        console.print(f"curve: {curve.method}", highlight=False)


def _fit_value(value: float | None) -> float:
    """A value the fit record of its method always holds (NaN, shown as such, if it does not)."""
    return math.nan if value is None else value


@app.command("curve")
def curve_command(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML) with [curve] or market_data.curve.")],
    out: Annotated[Path | None, typer.Option("--out", help="CSV file to write the curve to (whole maturities 1 to "
                                                           "the long end).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace an existing file.")] = False,
) -> None:
    """Fit today's risk-free curve only: print the method's parameters and key maturities, and
    write the curve at whole maturities (zero rates annual and continuous, one-year forwards,
    discount factors)."""
    from pqflow.calibration.assemble import fit_curve
    from pqflow.config.loader import load_config
    _register_part_kinds()
    from pqflow.market.curve_table import curve_table
    from pqflow.storage.calibration_sections import curve_fit_record
    from pqflow.storage.curve_csv import write_curve_csv

    if out is not None and out.exists() and not overwrite:
        _fail(PqflowError(f"{out} exists; pass --overwrite to replace it"))
    try:
        fitted, fit = fit_curve(load_config(config))
        table = curve_table(fitted)
    except PqflowError as exc:
        _fail(exc)
    curve_fit = curve_fit_record(fit, "the curve fit")
    _print_curve_fit(curve_fit)
    grid = Table(title=f"Risk-free curve ({curve_fit.method if curve_fit.method is not None else 'typed in'}), "
                       "whole maturities")
    for col in ("years", "zero (annual)", "zero (continuous)", "1y forward (annual)", "discount factor"):
        grid.add_column(col, justify="right")
    t = table["maturity_years"]
    for year in (1, 2, 5, 10, 15, 20, 25, 30, 40, 50, 60, 80, 100, 120, 150):
        i = int(year) - 1
        if i < t.size:
            grid.add_row(
                f"{year:g}", f"{table['zero_rate_annual'][i]:.5%}", f"{table['zero_rate_continuous'][i]:.5%}",
                f"{table['forward_1y_annual'][i]:.5%}", f"{table['discount_factor'][i]:.6f}",
            )
    console.print(grid)
    if out is not None:
        write_curve_csv(out, table)
        console.print(f"curve written to {out} ({t.size} maturities, 1 to {t[-1]:g} years)", style="green")
    _caution()


_LINE_LABEL = {"unit_linked_gmmb": "unit-linked", "participating": "with-profits",
               "deferred_annuity_gao": "annuity+GAO"}


@app.command()
@guarded(err_console)
def value(
    run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")],
    liabilities: Annotated[Path, typer.Option("--liabilities", help="Liability portfolio file (TOML).")],
    out: Annotated[Path | None, typer.Option("--out",
                                             help="Folder for the results (default RUN_DIR/valuation).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite",
                                            help="Replace earlier valuation results (only once the new valuation has "
                                                 "succeeded).")] = False,
) -> None:
    """Value liabilities with guarantees on both sets: best estimate, TVOG, reconciliation.

    Certainty-equivalent value and TVOG from the market-consistent set, the real-world set with
    deflators beside it, and their difference in standard errors.
    """
    from pqflow.liabilities import value_liabilities_cli

    try:
        _verified(run_dir, valuation=False)  # earlier results are checked only if kept
        summary = value_liabilities_cli(run_dir, liabilities, out, overwrite=overwrite)
    except PqflowError as exc:
        _fail(exc)
    val = valuation_summary_from_json(summary)
    currency = val.currency if val.currency is not None else ""
    table = Table(title=Text(f"Liability values, {currency} thousands (real world discounted with deflators)"))
    for col in ("line", "", "market consistent", "cert. equiv.", "TVOG", "real world", "diff/SE"):
        table.add_column(col, justify="left" if col in ("line", "quantity") else "right")

    def k(value: float | None, se: float | None = None) -> str:
        return fmt.money(value, scale=1e3) if se is None else fmt.money_se(value, se, scale=1e3)

    for line in val.lines:
        if line.level not in ("product", "total"):
            continue
        table.add_row(
            Text(str(_LINE_LABEL.get(line.name, line.name))),
            {"best_estimate": "BE"}.get(str(line.quantity), line.quantity),
            k(line.market_consistent_value, line.market_consistent_se),
            k(line.certainty_equivalent_value), k(line.tvog),
            k(line.real_world_value, line.real_world_se),
            fmt.signed(line.difference_in_se, 3),
        )
    console.print(table)
    products: dict[str, list[str]] = {}
    for line in val.lines:
        if line.level == "product" and line.quantity == "best_estimate":
            density = str(line.real_world_density if line.real_world_density is not None
                          else density_column("real_world"))
            products.setdefault(density, []).append(line.name)
    for density, names in products.items():
        used = [f"{d} / cash_account" for d in density.split(", ")]
        which = used[0] if len(used) == 1 else " or ".join(used) + " (by model point)"
        console.print(f"real-world deflators of {', '.join(names)}: {which}", highlight=False, markup=False)
    console.print("values and standard errors use control variates from known martingales "
                  "(plain means in the CSV as *_without_controls)", style="dim", highlight=False)
    if val.sensitivities:
        sens_table = Table(title=f"Sensitivities, {currency} thousands: change from the base, its SE on the common "
                           "scenarios and the SE independent sets would give")
        for col in ("sensitivity", "BE", "BE change", "SE", "SE indep.", "guarantee change", "TVOG change"):
            sens_table.add_column(col, justify="left" if col == "sensitivity" else "right")
        for entry in val.sensitivity_totals:
            be = entry.change("best_estimate", val.source)
            sens_table.add_row(
                entry.sensitivity, k(be.value), f"{be.change / 1e3:+,.0f}", k(be.change_se_paired),
                k(be.change_se_independent), f"{entry.change('guarantee', val.source).change / 1e3:+,.0f}",
                f"{entry.change('tvog', val.source).change / 1e3:+,.0f}",
            )
        console.print(sens_table)
    rec = val.reconciled
    verdict = rec.verdict if rec is not None else None
    if rec is not None and verdict:
        colour = {"agree": "green", "inconclusive": "dark_orange"}.get(verdict, "red")
        console.print(f"reconciliation of the two sets: [{colour}]{verdict.upper()}[/]", highlight=False)
        console.print(f"rule: {escape(str(rec.rule if rec.rule is not None else ''))}", style="dim", highlight=False)
        if rec.inconclusive_lines:
            share = rec.material_share if rec.material_share is not None else 0.02
            console.print(f"[yellow]inconclusive:[/] {escape(', '.join(rec.inconclusive_lines))} (a "
                          f"{share:.0%} difference would be seen less than half the time; "
                          "more scenarios would judge them)", highlight=False)
    target = out if out is not None else run_dir / "valuation"
    console.print(f"written to {target}: {', '.join(val.files or [])} (checked by pqflow verify)",
                  style="dim", highlight=False)
    if out is None and (run_dir / "validation" / "summary.json").is_file():
        from pqflow.report import write_report

        console.print(Text(f"report updated: {write_report(run_dir)}", style="dim"), highlight=False)
    _caution()
    if verdict == "differ":
        raise typer.Exit(code=1)


@app.command()
@guarded(err_console)
def report(
    run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")],
    prepared_by: Annotated[str | None, typer.Option("--prepared-by",
                                                    help="Name on the sign-off page (default: the run configuration's "
                                                         "[signoff] prepared_by).")] = None,
    reviewed_by: Annotated[str | None, typer.Option("--reviewed-by",
                                                    help="Reviewer's name on the sign-off page (default: [signoff] "
                                                         "reviewed_by).")] = None,
) -> None:
    """Write validation/report.html: a sign-off page, then every check, plot and table."""
    from pqflow.report import write_report
    from pqflow.report.html import SignOff

    try:
        for flag, name in (("--prepared-by", prepared_by), ("--reviewed-by", reviewed_by)):
            if name is not None and (len(name) > 200 or any(ord(ch) < 32 for ch in name)):
                raise PqflowError(f"{flag}: a name of at most 200 printable characters")
        _verified(run_dir)
        path = write_report(run_dir, SignOff(prepared_by=prepared_by or "", reviewed_by=reviewed_by or ""))
    except PqflowError as exc:
        _fail(exc)
    console.print(Text(f"report written to {path}", style="green"), highlight=False)
    _caution()


def _short(cell: str) -> str:
    """Hashes and run ids shown by their first 12 characters, as git does."""
    text = str(cell)
    if len(text) >= 32 and all(ch in "0123456789abcdef" for ch in text):
        return text[:12]
    return text


@app.command()
@guarded(err_console)
def compare(
    old_run: Annotated[Path, typer.Argument(help="The earlier run (e.g. last quarter).")],
    new_run: Annotated[Path, typer.Argument(help="The later run.")],
    html: Annotated[Path | None, typer.Option("--html",
                                              help="Also write the comparison as an HTML page with charts.")] = None,
    all_rows: Annotated[bool, typer.Option("--all",
                                           help="Every move (and unchanged items), not only the largest.")] = False,
    as_json: Annotated[bool, typer.Option("--json", help="Print the comparison as JSON (for machines) instead of "
                                                         "tables.")] = False,
    attribute: Annotated[bool, typer.Option("--attribute",
                                            help="Step-wise attribution of the liability change (needs --liabilities, "
                                                 "--old-config, --new-config).")] = False,
    liabilities: Annotated[Path | None, typer.Option("--liabilities",
                                                     help="Liability portfolio file (TOML) for --attribute.")] = None,
    old_config: Annotated[Path | None, typer.Option("--old-config",
                                                    help="The configuration the old run was made with (for "
                                                         "--attribute).")] = None,
    new_config: Annotated[Path | None, typer.Option("--new-config",
                                                    help="The configuration the new run was made with (for "
                                                         "--attribute).")] = None,
    attribution_dir: Annotated[Path | None, typer.Option("--attribution-dir",
                                                         help="Folder for the attribution's runs (default "
                                                              "NEW_RUN-attribution beside NEW_RUN).")] = None,
) -> None:
    """What moved between two runs: inputs matched by meaning (moves in bp and vol points,
    largest first), calibrated parameters, verdicts that changed, liabilities by line; with
    --attribute, the change in best estimate and TVOG step by step."""
    import json

    from pqflow.report import compare_runs, comparison_json, summary_lines, write_compare_html

    attribution = None
    try:
        _verified(old_run)
        _verified(new_run)
        comparison = compare_runs(old_run, new_run)
        if attribute:
            missing = [flag for flag, v in (("--liabilities", liabilities), ("--old-config", old_config),
                                             ("--new-config", new_config)) if v is None]
            if missing or old_config is None or new_config is None:
                raise PqflowError(f"--attribute needs {', '.join(missing)}")
            from pqflow.report.attribution import check_attribution

            target = attribution_dir or new_run.parent / f"{new_run.name}-attribution"
            check_attribution(old_run, new_run, old_config, new_config, target)  # before Prefect starts
            from pqflow.pipeline.attribution import attribute_change

            (err_console if as_json else console).print(
                f"attribution: one run and valuation per step into {target} (Prefect tasks)...", style="dim",
                highlight=False)
            attribution = attribute_change(str(old_run), str(new_run), str(old_config), str(new_config),
                                           str(liabilities), str(target))
    except PqflowError as exc:
        _fail(exc)
    if as_json:
        payload = comparison_json(comparison, everything=all_rows)
        if attribution is not None:
            payload["attribution"] = attribution
        print(json.dumps(payload, indent=1, default=str))
    else:
        console.print(f"[bold]{old_run}[/] -> [bold]{new_run}[/]", highlight=False)
        table = None
        for kind, item, *cells in summary_lines(comparison, everything=all_rows):
            if kind == "title":
                if table is not None:
                    console.print(table)
                table = Table(title=None, show_edge=False, pad_edge=False, box=None, header_style="bold")
                table.add_column(item, overflow="fold", min_width=28)
                for col in cells:
                    table.add_column(col, justify="right", no_wrap=True)
            elif kind == "note":
                if table is not None:
                    console.print(table)
                    table = None
                console.print(f"  {item}", style="dim", highlight=False)
            elif table is not None:
                table.add_row(_short(item), *(_short(x) for x in cells))
        if table is not None:
            console.print(table)
    if attribution is not None and not as_json:
        _print_attribution(attribution)
    if html is not None:
        path = write_compare_html(comparison, html, everything=all_rows, attribution=attribution)
        (err_console if as_json else console).print(f"comparison page written to {path}", style="green",
                                                    highlight=False)
    if not as_json:
        _caution()


def _print_attribution(result: dict[str, Any]) -> None:
    table = Table(title="Attribution of the change, total line (market consistent, ± SE of the paired change)")
    for col in ("step", "best estimate", "TVOG"):
        table.add_column(col, justify="left" if col == "step" else "right")
    for r in result["rows"]:
        if r["line"] == "total":
            table.add_row(f"{r['step']}. {r['title']}", fmt.money_se(r["best_estimate_change"], r["best_estimate_se"]),
                          fmt.money_se(r["tvog_change"], r["tvog_se"]))
    t = result["totals"].get("total", {})
    table.add_row("total change", fmt.money(t.get("best_estimate_total"), sign=True), fmt.money(t.get("tvog_total"),
                                                                                                sign=True))
    console.print(table)
    checks = ", ".join(f"{k.replace('_', ' ')}: {'yes' if v else 'NO'}" for k, v in result.get("checks", {}).items())
    if checks:
        console.print(checks, style="dim", highlight=False)


@app.command()
@guarded(err_console)
def verify(run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")]) -> None:
    """Check every file of a run against its manifest (sizes and sha256)."""
    from pqflow.storage.manifest import manifest_record, verify_run
    from pqflow.storage.valuation_files import verify_valuation

    try:
        manifest = manifest_record(verify_run(run_dir))
        valuation = verify_valuation(run_dir)
    except PqflowError as exc:
        _fail(exc)
    console.print(f"{run_dir}: {len(manifest.files)} files match manifest.json", style="green", markup=False)
    if valuation is not None:
        console.print(f"{run_dir / 'valuation'}: {len(manifest_record(valuation).files)} files match its manifest.json "
                      "and belong to this run", style="green", markup=False)


@app.command()
def deploy(
    config: Annotated[Path, typer.Argument(help="Run configuration (TOML); stored as an absolute path.")],
    out_root: Annotated[str, typer.Option("--out-root",
                                          help="Folder (or URI) under which each run writes OUT_ROOT/VALUATION_DATE.")],
    scenarios: Annotated[int | None, typer.Option(help="Scenarios per set (overrides the file).")] = None,
    seed: Annotated[int | None, typer.Option(help="Root seed (overrides the file).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Let a run replace an earlier run of the same "
                                                               "valuation date.")] = False,
    pool: Annotated[str, typer.Option("--pool", help="Process work pool (created if absent).")] = "pqflow",
    name: Annotated[str, typer.Option("--name", help="Deployment name.")] = "quarterly",
    cron: Annotated[str, typer.Option("--cron", help="Schedule (cron); default 06:00 on the first day after each "
                                                     "quarter end.")] = "0 6 1 1,4,7,10 *",
    timezone: Annotated[str, typer.Option("--timezone", help="Time zone of the schedule (IANA name).")] = "UTC",
    paused: Annotated[bool, typer.Option("--paused", help="Register with the schedule paused.")] = False,
) -> None:
    """Register the quarterly run as a Prefect deployment on the server at PREFECT_API_URL."""
    from pqflow.pipeline.deployments import deploy_quarterly

    try:
        info = deploy_quarterly(
            config, out_root, scenarios=scenarios, seed=seed, overwrite=overwrite, name=name,
            work_pool=pool, cron=cron, timezone=timezone, paused=paused,
        )
    except PqflowError as exc:
        _fail(exc)
    created = " (created)" if info["work_pool_created"] else ""
    console.print(f"deployment {info['deployment']} registered at {info['api_url']}", style="green", highlight=False,
                  markup=False)
    console.print(
        f"schedule: cron {info['schedule']['cron']} ({info['schedule']['timezone']}){' paused' if paused else ''}\n"
        f"work pool: {info['work_pool']}{created}, type process\n"
        f"parameters: {info['parameters']}\n"
        f"next: prefect worker start --pool {info['work_pool']}   (in a shell where pqflow is installed)\n"
        f"run now: prefect deployment run '{info['deployment']}'",
        highlight=False, markup=False, soft_wrap=True,
    )


@app.command()
def version() -> None:
    """Print the version."""
    console.print(__version__)


@app.command()
@guarded(err_console)
def export(
    run_dir: Annotated[Path, typer.Argument(help="A finished run directory.")],
    measure: Annotated[str, typer.Option("--measure", help="real_world or market_consistent.")],
    fmt: Annotated[str, typer.Option("--format", help="csv or parquet.")] = "csv",
    columns: Annotated[str | None, typer.Option("--columns",
                                                help="Comma-separated columns (default: all); scenario and time always "
                                                     "come first.")] = None,
    scenarios: Annotated[str | None, typer.Option("--scenarios",
                                                  help="Scenarios FIRST:STOP (FIRST to STOP-1, e.g. 0:100); default "
                                                       "all.")] = None,
    out: Annotated[Path | None, typer.Option("--out", help="File to write (default: CSV on standard output).")] = None,
    overwrite: Annotated[bool, typer.Option("--overwrite", help="Replace an existing --out file.")] = False,
) -> None:
    """Stream a slice of one scenario set to CSV or Parquet, checking each part read against the manifest."""
    from pqflow.storage.export import export_slice

    cols = [c.strip() for c in columns.split(",") if c.strip()] if columns else None
    try:
        result = export_slice(run_dir, measure=measure, fmt=fmt, columns=cols, scenarios=scenarios, out=out,
                              overwrite=overwrite)
    except PqflowError as exc:
        _fail(exc)
    if out is not None:
        console.print(
            Text(f"{result.rows:,} rows of scenarios {result.first_scenario}..{result.stop_scenario - 1} "
                 f"({', '.join(result.columns)}) written to {out}; units in {out}.meta.json"),
            highlight=False,
        )


def main() -> None:
    app()


if __name__ == "__main__":
    main()
