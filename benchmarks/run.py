"""`make bench`: speed and memory of pqflow, measured side by side in one run. Not part of `make test`.

Sections (each prints a table; all figures go to benchmarks/results/latest.json):

1. core     simulation core vs QuantLib's path generator (same two-factor model: Hull-White
            rates and a correlated equity index, same monthly grid, one core), and vs the floor
            of drawing the same standard normals with numpy. "Simulation core" means states
            (x, int x, ln S) + density weights + deflator (which needs the cash account); the
            cost with every output column (10 bonds, equity, short rate) is reported beside it.
2. parquet  writing one part: pqflow's writer vs plain ``pyarrow.parquet.write_table`` on the same
            table, and the encodings that were compared to choose the writer's settings.
3. quarter  a standard quarter through the flow's tasks with validation: real world 10,000 x 50
            years monthly, market consistent 10,000 x 60 years annual, bonds at 10 maturities, one
            equity index; threads, then Dask (local cluster of 2 worker processes). Wall time,
            peak memory of the whole process tree, cores busy while simulating.
4. scaling  real-world set only (library loop, no Prefect), 50 years monthly, 1,000 / 10,000 /
            100,000 scenarios, one subprocess per size: peak RSS and time, log-log exponent of
            time against scenarios x steps.
6. cli      the standard quarter of section 3 end to end through the command line (``pqflow run``,
            every check, the report, Prefect's temporary server), threads then Dask, beside the
            floor measured in the same run: the work no implementation can skip, on one core (draw
            every standard normal the quarter's paths consume, write the parts' tables with plain
            ``pyarrow.parquet.write_table`` defaults, read each part once). Ratio = wall / floor.
5. heston   the cost per path-step of an equity index with Heston variance (the non-Gaussian
            part, its scheme and density, correlated with rates) beside the same index with a
            deterministic volatility (the Gaussian economy): real-world batch, 2,000 paths.

Usage: ``python benchmarks/run.py [core parquet quarter scaling heston cli]`` (default: all).
"""

from __future__ import annotations

import json
import os
import platform
import re
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

REPO = Path(__file__).resolve().parents[1]
RESULTS = REPO / "benchmarks" / "results"
DEMO = REPO / "scenario_configs" / "demo.toml"
BONDS = [1, 2, 3, 5, 7, 10, 15, 20, 25, 30]
SECTIONS = ("core", "parquet", "quarter", "scaling", "heston", "cli")
SCALING_BATCH = 500  # the demo's batch size, the same for every size


# ------------------------------------------------------------------------------------ helpers


def _best(fn, repeats: int = 5) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def make_config(path: Path, **simulation: Any) -> Path:
    """The demo configuration with ``[simulation]`` values replaced and 10 bond maturities, cut
    to the issue's standard model: Hull-White rates and one equity index (the further indices,
    inflation and credit of the demo balance sheet are dropped)."""
    text = DEMO.read_text(encoding="utf-8")
    # drop every table of the further parts, and their market-data files
    text = re.sub(r"^\[\[?(indices|inflation|credit|credit\.ratings)\]\]?\n.*?(?=^\[|\Z)", "", text, flags=re.S | re.M)
    text = re.sub(r"^(inflation_swaps|inflation_caps|credit_spreads)\s*=.*\n", "", text, flags=re.M)
    # market-data paths are relative to the configuration file: make them absolute
    text = re.sub(r'"(market_data/[^"]+)"', lambda m: json.dumps(str(DEMO.parent / m.group(1))), text)

    def section(name: str, body: str) -> str:
        nonlocal text
        m = re.search(rf"^\[{name}\]\n(.*?)(?=^\[|\Z)", text, flags=re.S | re.M)
        assert m, name
        text = text[: m.start(1)] + body + text[m.end(1):]
        return text

    m = re.search(r"^\[simulation\]\n(.*?)(?=^\[|\Z)", text, flags=re.S | re.M)
    assert m
    body = m.group(1)
    for key, value in simulation.items():
        val = ("true" if value else "false") if isinstance(value, bool) else str(value)
        body, n = re.subn(rf"^{key}\s*=.*$", f"{key} = {val}", body, flags=re.M)
        if not n:
            body += f"{key} = {val}\n"
    section("simulation", body)
    m = re.search(r"^\[outputs\]\n(.*?)(?=^\[|\Z)", text, flags=re.S | re.M)
    assert m
    section("outputs", re.sub(r"^bond_maturities\s*=.*$", f"bond_maturities = {BONDS}", m.group(1), flags=re.M))
    path.write_text(text, encoding="utf-8")
    return path


def _model(config: Path):
    from pqflow.calibration import assemble_calibration, build_model
    from pqflow.config import load_config

    cfg = load_config(config)
    cal = assemble_calibration(cfg)
    return cfg, cal, build_model(cal, tuple(cfg.outputs.bond_maturities))


def _table(title: str, header: list[str], rows: list[list[Any]]) -> None:
    cells = [[str(c) for c in header]] + [[f"{c:,.3g}" if isinstance(c, float) else str(c) for c in r] for r in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(header))]
    print(f"\n{title}")
    for k, r in enumerate(cells):
        print("  " + "  ".join(c.rjust(w) if i else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths, strict=True))))
        if k == 0:
            print("  " + "  ".join("-" * w for w in widths))


# ------------------------------------------------------------------------ 1. simulation core


def _quantlib_paths(times: np.ndarray, n_paths: int, *, a: float, sigma: float, s0: float, vol: float,
                    rho: float, rate: float, extract: bool, antithetic: bool = False) -> None:
    import QuantLib as ql

    today = ql.Date(30, 9, 2026)
    ql.Settings.instance().evaluationDate = today
    dc = ql.Actual365Fixed()
    curve = ql.YieldTermStructureHandle(ql.FlatForward(today, rate, dc))
    zero = ql.YieldTermStructureHandle(ql.FlatForward(today, 0.0, dc))
    hw = ql.HullWhiteProcess(curve, a, sigma)
    bsm = ql.BlackScholesMertonProcess(
        ql.QuoteHandle(ql.SimpleQuote(s0)), zero, curve,
        ql.BlackVolTermStructureHandle(ql.BlackConstantVol(today, ql.NullCalendar(), vol, dc)),
    )
    process = ql.StochasticProcessArray([hw, bsm], [[1.0, rho], [rho, 1.0]])
    grid = list(ql.TimeGrid(list(times)))
    steps = len(grid) - 1
    rsg = ql.GaussianRandomSequenceGenerator(
        ql.UniformRandomSequenceGenerator(2 * steps, ql.UniformRandomGenerator(42))
    )
    gen = ql.GaussianMultiPathGenerator(process, grid, rsg, False)
    if not extract:
        for _ in range(n_paths):
            gen.next()
        return
    rates = np.empty((n_paths, steps + 1))
    equity = np.empty((n_paths, steps + 1))
    for i in range(n_paths):
        paths = (gen.antithetic() if antithetic and i % 2 else gen.next()).value()
        rates[i] = np.fromiter(paths[0], float, steps + 1)
        equity[i] = np.fromiter(paths[1], float, steps + 1)


def bench_core(tmp: Path) -> dict[str, Any]:
    from pqflow.simulation.engine import Workspace, grid_laws, simulate_batch, simulate_states, time_grid

    cfg, cal, model = _model(make_config(tmp / "core.toml"))
    times = time_grid(50, 12)
    k_steps = times.size - 1
    t0 = time.perf_counter()
    grid_laws(model, times)
    laws_seconds = time.perf_counter() - t0
    rows, out = [], {"laws_seconds_once_per_grid": laws_seconds}
    n = 2000
    rng = np.random.default_rng(1)
    ps = n * k_steps
    floor = _best(lambda: rng.standard_normal((k_steps, 3, n)), 7)
    core = _best(lambda: simulate_batch(model, times, measure="real_world", n_paths=n, rng=rng, antithetic=False,
                                        columns=()), 7)
    states = _best(lambda: simulate_states(model, times, measure="real_world", n_paths=n, rng=rng, antithetic=False), 7)
    full = _best(lambda: simulate_batch(model, times, measure="real_world", n_paths=n, rng=rng, antithetic=False), 7)
    ws = Workspace()
    core_ws = _best(lambda: simulate_batch(model, times, measure="real_world", n_paths=n, rng=rng, antithetic=False,
                                           columns=(), workspace=ws), 7)
    anti = _best(lambda: simulate_batch(model, times, measure="real_world", n_paths=n, rng=rng, antithetic=True,
                                        columns=()), 7)
    from pqflow.jobs.steps import run_density_blocks
    from pqflow.simulation.scenarios import block_layout

    layout = {k: rows for k, (rows, _) in block_layout(model, None, run_density_blocks(cfg)).items()}
    blocks = _best(lambda: simulate_batch(model, times, measure="real_world", n_paths=n, rng=rng, antithetic=False,
                                          columns=(), density_blocks=layout), 7)
    n_ql = 300
    ql_kw = dict(a=cal.rates.mean_reversion, sigma=cal.rates.volatility, s0=1000.0, vol=0.17, rho=-0.15, rate=0.03)
    ql_gen = _best(lambda: _quantlib_paths(times, n_ql, extract=False, **ql_kw), 3) / (n_ql * k_steps)
    ql_user = _best(lambda: _quantlib_paths(times, n_ql, extract=True, **ql_kw), 3) / (n_ql * k_steps)
    ql_anti = _best(lambda: _quantlib_paths(times, n_ql, extract=True, antithetic=True, **ql_kw), 3) / (n_ql * k_steps)
    per = {
        "numpy floor: draw 3 normals per path-step": floor / ps,
        "pqflow states + density": states / ps,
        "pqflow simulation core (states + density + deflator)": core / ps,
        "pqflow core, buffers reused across batches (Workspace)": core_ws / ps,
        "pqflow core, antithetic (draws half the normals)": anti / ps,
        f"pqflow core + default density blocks ({', '.join(layout)})": blocks / ps,
        "pqflow with every output column (16)": full / ps,
        "QuantLib GaussianMultiPathGenerator, paths to numpy": ql_user,
        "QuantLib GaussianMultiPathGenerator, generation only": ql_gen,
        "QuantLib, antithetic pairs (next/antithetic), paths to numpy": ql_anti,
    }
    for name, sec in per.items():
        rows.append([name, sec * 1e9, 1.0 / sec, (sec / (core / ps))])
    _table(
        f"1. Simulation core, one core, 50 years monthly ({k_steps} steps), {n} paths per batch "
        f"(QuantLib {n_ql} paths); step laws once per grid: {laws_seconds:.2f} s",
        ["what", "ns / path-step", "path-steps / s", "x pqflow core"], rows,
    )
    out.update({
        "grid": "50 years monthly", "paths": n, "ns_per_path_step": {k: v * 1e9 for k, v in per.items()},
        "core_over_floor": core / floor,
        "core_with_workspace_over_floor": core_ws / floor,
        "quantlib_user_over_core": ql_user / (core / ps),
        "quantlib_generation_only_over_core": ql_gen / (core / ps),
        "quantlib_antithetic_over_core_antithetic": ql_anti / (anti / ps),
        "full_columns_over_core": full / core,
        "density_blocks_over_core": blocks / core,
    })
    print(f"  core / numpy floor = {core / floor:.2f}, with reused buffers {core_ws / floor:.2f} (target <= 1.5); "
          f"QuantLib (paths to numpy) / core = "
          f"{ql_user / (core / ps):.0f}x (target >= 30x), both antithetic {ql_anti / (anti / ps):.0f}x; QuantLib "
          f"generation only / core = {ql_gen / (core / ps):.1f}x")
    print(f"  core with the default density blocks / core = {blocks / core:.3f} (target <= 1.15)")
    return out


# ------------------------------------------------------------------------------- 2. Parquet


def bench_parquet(tmp: Path) -> dict[str, Any]:
    import pyarrow.parquet as pq

    from pqflow.jobs.steps import generate_part, plan_run
    from pqflow.storage.parquet import KEY_COLUMNS, WRITE_OPTIONS, read_part, write_part

    cfg, cal, _ = _model(make_config(tmp / "pq.toml", scenarios=1000, batch_size=1000, horizon_years=50,
                                     steps_per_year=12))
    plan = plan_run(cfg)
    rec = generate_part(cal, plan, "real_world", plan.batches_for("real_world")[0], tmp / "pqsrc")
    table = read_part(tmp / "pqsrc" / rec.path)
    raw = table.nbytes
    floats = [f.name for f in table.schema if f.name not in KEY_COLUMNS and str(f.type) == "double"]
    target = tmp / "x.parquet"
    variants = {
        "pqflow write_part (zstd-1, byte-stream-split, dict/stats on keys, temp+rename)": lambda: write_part(table,
                                                                                                             target),
        "plain pyarrow write_table, defaults (snappy, dictionary)": lambda: pq.write_table(table, target),
        "pyarrow, same settings as pqflow, no temp+rename": lambda: pq.write_table(
            table, target, **WRITE_OPTIONS, use_dictionary=list(KEY_COLUMNS), write_statistics=list(KEY_COLUMNS),
            use_byte_stream_split=floats),
        "pyarrow zstd-1, dictionary on keys": lambda: pq.write_table(
            table, target, compression="zstd", compression_level=1, use_dictionary=list(KEY_COLUMNS)),
        "pyarrow snappy, byte-stream-split, dictionary on keys": lambda: pq.write_table(
            table, target, compression="snappy", use_dictionary=list(KEY_COLUMNS), use_byte_stream_split=floats),
        "pyarrow no compression, dictionary on keys": lambda: pq.write_table(
            table, target, compression="none", use_dictionary=list(KEY_COLUMNS)),
    }
    rows, res = [], {}
    for name, fn in variants.items():
        sec = _best(fn, 5)
        size = target.stat().st_size
        read = _best(lambda: pq.read_table(target), 3)
        rows.append([name, raw / sec / 1e6, size / raw, raw / read / 1e6])
        res[name] = {"seconds": sec, "mb_per_s": raw / sec / 1e6, "size_ratio": size / raw,
                     "read_mb_per_s": raw / read / 1e6}
    _table(f"2. Parquet, one part: {table.num_rows:,} rows x {table.num_columns} columns, {raw / 1e6:.0f} MB in memory",
           ["writer", "write MB/s", "size / memory", "read MB/s"], rows)
    ours = res[next(iter(variants))]["mb_per_s"]
    plain = res["plain pyarrow write_table, defaults (snappy, dictionary)"]["mb_per_s"]
    same = res["pyarrow, same settings as pqflow, no temp+rename"]["mb_per_s"]
    print(f"  pqflow / plain pyarrow defaults = {ours / plain:.2f}x the speed; pqflow / pyarrow with the same "
          f"settings = {ours / same:.2f} (target: within 1.5x)")
    return {"rows": table.num_rows, "columns": table.num_columns, "memory_mb": raw / 1e6, "writers": res}


# --------------------------------------------------------------------------- process monitor


def _tree(pid: int):
    import psutil

    try:
        root = psutil.Process(pid)
        return [root, *root.children(recursive=True)]
    except psutil.NoSuchProcess:
        return []


def monitored(cmd: list[str], *, env: dict[str, str] | None = None) -> dict[str, Any]:
    """Run ``cmd``, sampling the RSS and CPU time of its whole process tree every 0.1 s; the
    child prints one JSON line (its result) last."""
    import psutil

    proc = subprocess.Popen(cmd, cwd=REPO, stdout=subprocess.PIPE, text=True, env=env)
    samples, cpu_seen = [], {}
    peak = 0
    while proc.poll() is None:
        rss = 0
        for p in _tree(proc.pid):
            try:
                rss += p.memory_info().rss
                t = p.cpu_times()
                cpu_seen[p.pid] = t.user + t.system
            except psutil.Error:
                pass
        peak = max(peak, rss)
        samples.append((time.time(), sum(cpu_seen.values())))
        time.sleep(0.1)
    out = proc.stdout.read().strip().splitlines()
    if proc.returncode != 0:
        raise RuntimeError(f"{cmd} failed with {proc.returncode}: {out[-5:]}")
    result = json.loads(out[-1])
    result["peak_tree_rss_mb"] = peak / 1e6
    g0, g1 = result.get("generation_start"), result.get("generation_end")
    if g0 and g1:
        def cpu_at(t):
            before = [c for s, c in samples if s <= t]
            return before[-1] if before else samples[0][1]
        result["cores_busy_while_generating"] = (cpu_at(g1) - cpu_at(g0)) / max(g1 - g0, 1e-9)
    return result


# ------------------------------------------------------------------------------- 3. quarter


def quarter_child(runner: str, workdir: str) -> None:
    """A standard quarter through the flow's tasks: one configuration, one calibration, each set
    on its own grid (``[simulation.market_consistent]``)."""
    import uuid

    from prefect import flow
    from prefect.futures import as_completed

    import pqflow.pipeline  # noqa: F401  (quiet Prefect defaults, set before Prefect is imported)
    from pqflow.config import load_config
    from pqflow.jobs.steps import plan_run
    from pqflow.pipeline.flows import (
        _shared_api,
        calibrate_task,
        generate_part_task,
        manifest_task,
        task_runner_for,
        validate_task,
    )

    work = Path(workdir)
    path = make_config(work / "quarter.toml", scenarios=10_000, batch_size=1000, horizon_years=50, steps_per_year=12)
    with path.open("a", encoding="utf-8") as fh:  # the market-consistent set's own grid
        fh.write("\n[simulation.market_consistent]\nhorizon_years = 60\nsteps_per_year = 1\n")
    cfg = load_config(path)
    plan = plan_run(cfg)
    marks: dict[str, float] = {}

    @flow(name="standard-quarter-benchmark")
    def standard_quarter(staging: str) -> dict[str, Any]:
        calibration = calibrate_task(cfg, staging)
        marks["generation_start"] = time.time()
        futures = [generate_part_task.submit(calibration, plan, m, b, staging) for m, b in plan.tasks()]
        parts = [f.result() for f in as_completed(futures)]
        marks["generation_end"] = time.time()
        summary = validate_task(staging, cfg)
        marks["validation_end"] = time.time()
        manifest_task(staging, cfg, plan, parts, uuid.uuid4().hex)
        return {"verdict": summary["verdict"], "parts": len(parts)}

    staging = work / f"quarter-{runner}"
    staging.mkdir()
    t0 = time.time()
    with _shared_api(runner == "dask"):
        runner_obj = task_runner_for(runner, workers=2)
        result = standard_quarter.with_options(task_runner=runner_obj)(str(staging))
    t1 = time.time()
    size = sum(p.stat().st_size for p in staging.rglob("*") if p.is_file())
    print(json.dumps({**result, **marks, "start": t0, "end": t1, "wall_seconds": t1 - t0,
                      "generation_seconds": marks["generation_end"] - marks["generation_start"],
                      "validation_seconds": marks["validation_end"] - marks["generation_end"],
                      "bytes_written": size}))


def bench_quarter(tmp: Path) -> dict[str, Any]:
    rows, res = [], {}
    env = {**os.environ, "DASK_LOGGING__DISTRIBUTED": "warning"}
    for runner in ("threads", "dask"):
        r = monitored([sys.executable, str(Path(__file__).resolve()), "--child-quarter", runner, str(tmp)], env=env)
        res[runner] = r
        rows.append([runner, r["wall_seconds"], r["generation_seconds"], r["validation_seconds"],
                     r["peak_tree_rss_mb"], r.get("cores_busy_while_generating", float("nan")), r["verdict"]])
        shutil.rmtree(tmp / f"quarter-{runner}", ignore_errors=True)
    _table("3. Standard quarter: real world 10,000 x 600 monthly steps + market consistent 10,000 x 60 annual "
           "steps, 10 bonds, 1 equity; calibrate, generate, validate, manifest (Prefect local mode)",
           ["runner", "wall s", "generate s", "validate s", "peak MB (tree)", "cores busy", "verdict"], rows)
    print("  targets: < 60 s, < 2,000 MB, both cores busy while simulating; wall time includes Prefect's "
          "temporary API server (about 7 s)")
    return res


# ------------------------------------------------------------------------------- 4. scaling


def scaling_child(scenarios: int, steps_per_year: int, workdir: str) -> None:
    """Real-world set only, library loop (no Prefect): generate every part, then validate the
    set part by part (martingale and density tables)."""
    from pqflow.calibration import assemble_calibration
    from pqflow.config import load_config
    from pqflow.jobs.steps import generate_part, plan_run
    from pqflow.storage.scenario_set import ScenarioSet
    from pqflow.validation.density import density_table
    from pqflow.validation.martingale import martingale_table

    work = Path(workdir) / f"scale-{scenarios}-{steps_per_year}"
    work.mkdir()
    cfg = load_config(make_config(work / "c.toml", scenarios=scenarios, batch_size=min(SCALING_BATCH, scenarios),
                                  horizon_years=50, steps_per_year=steps_per_year))
    cal = assemble_calibration(cfg)
    plan = plan_run(cfg)
    t0 = time.perf_counter()
    for b in plan.batches_for("real_world"):
        generate_part(cal, plan, "real_world", b, work)
    t1 = time.perf_counter()
    reader = ScenarioSet(run_dir=work, measure="real_world")
    martingale_table(reader, cal.curve.discount)
    density_table(reader)
    t2 = time.perf_counter()
    size = sum(p.stat().st_size for p in work.rglob("*.parquet"))
    shutil.rmtree(work)
    print(json.dumps({"generate_seconds": t1 - t0, "validate_seconds": t2 - t1, "bytes": size,
                      "vmhwm_mb": _vmhwm_mb(),
                      "path_steps": scenarios * (plan.times_for("real_world").size - 1),
                      "parts": len(plan.batches_for("real_world"))}))


def _vmhwm_mb() -> float:
    """Peak resident memory of this process since it started (``VmHWM``; unlike ``ru_maxrss``
    it does not include the parent's memory inherited at fork, before exec)."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmHWM:"):
            return int(line.split()[1]) / 1024
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def bench_scaling(tmp: Path) -> dict[str, Any]:
    cases = [(1_000, 12), (10_000, 12), (100_000, 12), (10_000, 1), (10_000, 4)]
    rows, res = [], []
    for n, spy in cases:
        proc = subprocess.Popen([sys.executable, str(Path(__file__).resolve()), "--child-scaling", str(n), str(spy),
                                 str(tmp)],
                                cwd=REPO, stdout=subprocess.PIPE, text=True)
        out = proc.stdout.read()
        _, status, usage = os.wait4(proc.pid, 0)
        if status != 0:
            raise RuntimeError(f"scaling child {n} failed: {out[-500:]}")
        r = json.loads(out.strip().splitlines()[-1])
        r.update({"scenarios": n, "steps_per_year": spy, "peak_rss_mb": r["vmhwm_mb"],
                  "ru_maxrss_mb_including_fork": usage.ru_maxrss / 1024})
        total = r["generate_seconds"] + r["validate_seconds"]
        r["ns_per_path_step"] = total / r["path_steps"] * 1e9
        res.append(r)
        rows.append([f"{n:,} x {50 * spy} steps", r["path_steps"] / 1e6, r["generate_seconds"], r["validate_seconds"],
                     r["ns_per_path_step"], r["peak_rss_mb"], r["bytes"] / 1e9])
    def exponent(cases):
        x = np.log([r["path_steps"] for r in cases])
        y = np.log([r["generate_seconds"] + r["validate_seconds"] for r in cases])
        return float(np.polyfit(x, y, 1)[0])

    slope = exponent(res)
    slope_large = exponent([r for r in res if r["path_steps"] >= 2_000_000])
    monthly = [r["peak_rss_mb"] for r in res if r["steps_per_year"] == 12]
    spread = max(monthly) / min(monthly) - 1.0
    _table(f"4. Scaling, real-world set only (library loop, one subprocess per size, batches of {SCALING_BATCH:,})",
           ["size", "M path-steps", "generate s", "validate s", "ns / path-step", "peak RSS MB", "GB written"], rows)
    print(f"  log-log exponent of time in scenarios x steps: {slope:.3f} over all sizes, {slope_large:.3f} over "
          f"sizes >= 2M path-steps (1 = linear; fixed costs such as calibration reading and process start weigh on "
          f"small runs); peak RSS of the three monthly sizes varies by {spread:.1%} (target within 20%)")
    return {"cases": res, "batch_size": SCALING_BATCH, "loglog_exponent_all": slope,
            "loglog_exponent_large": slope_large, "peak_rss_spread_monthly": spread}


# ------------------------------------------------------------------------------- 5. Heston


def bench_heston(tmp: Path) -> dict[str, Any]:
    from pqflow.measure.heston_density import heston_prices_of_risk
    from pqflow.models.heston import HestonIndex, HestonParams
    from pqflow.simulation.engine import time_grid
    from pqflow.simulation.scenarios import simulate_part

    cfg, cal, model = _model(make_config(tmp / "heston.toml"))
    p = HestonParams(v0=0.03, kappa=1.2, theta=0.04, xi=0.5, rho=-0.5)
    rho_r = cal.rates.short_rate_correlation(cal.core_index.rates_correlation)  # with the short-rate shock
    lam = heston_prices_of_risk(kappa=p.kappa, theta=p.theta, xi=p.xi, equity_risk_premium=0.035,
                                real_world_long_run_volatility=None, rho=p.rho, explained=rho_r**2)
    n = 2000
    rows, out = [], {}
    for label, spy, sub in (("50 years monthly, 1 substep per step", 12, 12), ("50 years annual, 12 substeps per step",
                                                                               1, 12)):
        times = time_grid(50, spy)
        ps = n * (times.size - 1)
        spec = HestonIndex(name="heston_bench", column="equity_heston_bench", level=1000.0, income_yield=0.028,
                           params=p,
                           prices_of_risk=lam, loadings=(("rates", rho_r),), explained=rho_r**2,
                           rates_correlation=rho_r,
                           substeps_per_year=sub)
        base = _best(lambda times=times: simulate_part(model, times, measure="real_world", n_paths=n, seed=1, batch=0,
                                                      antithetic=False), 3)
        with_h = _best(lambda times=times, spec=spec: simulate_part(model, times, measure="real_world", n_paths=n,
                                                                    seed=1, batch=0, antithetic=False,
                                             heston=(spec,)), 3)
        det_index = base / ps
        heston = (with_h - base) / ps
        rows.append([label, det_index * 1e9, heston * 1e9, heston / det_index])
        out[label] = {"deterministic_economy_ns_per_path_step": det_index * 1e9,
                      "heston_index_ns_per_path_step": heston * 1e9, "ratio": heston / det_index}
    _table("5. Heston index beside a deterministic-volatility index (real world, one core, 2,000 paths)",
           ["grid", "economy with deterministic index, ns / path-step", "Heston index alone, ns / path-step",
            "Heston / economy"], rows)
    print("  the Heston index's cost grows with its substeps (12 a year here); the economy's with its states")
    return out


# ------------------------------------------------------------------ 6. command line, end to end


def quarter_config(path: Path) -> Path:
    """The standard quarter: real world 10,000 x 50 years monthly, market consistent 10,000 x 60
    years annual (its own grid), 10 bonds, one equity index."""
    make_config(path, scenarios=10_000, batch_size=1000, horizon_years=50, steps_per_year=12)
    with path.open("a", encoding="utf-8") as fh:
        fh.write("\n[simulation.market_consistent]\nhorizon_years = 60\nsteps_per_year = 1\n")
    return path


def quarter_floor(run_dir: Path, normals_per_step: int = 3) -> dict[str, float]:
    """The floor of the quarter in ``run_dir``, one core: draw the standard normals of every
    path-step of both sets (``normals_per_step`` per path-step, as in section 1), write every
    part's table with ``pyarrow.parquet.write_table`` defaults and read each part once."""
    import pyarrow.parquet as pq

    parts = sorted((run_dir / "scenarios").rglob("*.parquet"))
    rng = np.random.default_rng(1)
    draw = write = read = 0.0
    path_steps = 0
    scratch = run_dir.parent / "floor.parquet"
    for part in parts:
        t0 = time.perf_counter()
        table = pq.read_table(part)
        read += time.perf_counter() - t0
        t0 = time.perf_counter()
        pq.write_table(table, scratch)
        write += time.perf_counter() - t0
        n = table.num_rows  # one row per path and time: the path-steps of this part, plus its starts
        path_steps += n
        t0 = time.perf_counter()
        rng.standard_normal((normals_per_step, n))
        draw += time.perf_counter() - t0
    scratch.unlink(missing_ok=True)
    return {"draw_seconds": draw, "write_seconds": write, "read_seconds": read,
            "floor_seconds": draw + write + read, "path_steps": path_steps, "parts": len(parts)}


def bench_cli(tmp: Path, repeats: int = 1) -> dict[str, Any]:
    config = quarter_config(tmp / "cli-quarter.toml")
    pqflow = Path(sys.executable).parent / "pqflow"
    env = {**os.environ, "DASK_LOGGING__DISTRIBUTED": "warning"}
    rows, res = [], {"runs": []}
    floor = None
    for k in range(repeats):
        for runner in ("threads", "dask"):
            out = tmp / f"cli-{runner}-{k}"
            t0 = time.perf_counter()
            proc = subprocess.run([str(pqflow), "run", str(config), "--out", str(out), "--runner", runner],
                                  cwd=REPO, env=env, capture_output=True, text=True)
            wall = time.perf_counter() - t0
            if proc.returncode != 0:
                raise RuntimeError(f"pqflow run --runner {runner} failed ({proc.returncode}): {proc.stderr[-800:]}")
            if floor is None:
                floor = quarter_floor(out)
            size = sum(p.stat().st_size for p in (out / "scenarios").rglob("*.parquet"))
            res["runs"].append({"runner": runner, "wall_seconds": wall, "scenario_bytes": size})
            shutil.rmtree(out, ignore_errors=True)
    assert floor is not None
    for runner in ("threads", "dask"):
        walls = [r["wall_seconds"] for r in res["runs"] if r["runner"] == runner]
        res[runner] = {"wall_seconds_best": min(walls), "wall_seconds_all": walls,
                       "over_floor": min(walls) / floor["floor_seconds"]}
        rows.append([f"pqflow run --runner {runner}", min(walls), min(walls) / floor["floor_seconds"]])
    rows.append(["floor: draw normals + plain pyarrow write + read once (one core)", floor["floor_seconds"], 1.0])
    res["floor"] = floor
    res["dask_over_threads"] = res["dask"]["wall_seconds_best"] / res["threads"]["wall_seconds_best"]
    _table("6. Standard quarter end to end through the command line (every check, report, temporary Prefect server)",
           ["what", "wall s", "x floor"], rows)
    print(f"  floor = draw {floor['draw_seconds']:.2f} s + write {floor['write_seconds']:.2f} s + read "
          f"{floor['read_seconds']:.2f} s over {floor['parts']} parts; end-to-end ratio (threads) = "
          f"{res['threads']['over_floor']:.2f}x the floor (target <= 5x, <= 8 s); Dask / threads = "
          f"{res['dask_over_threads']:.2f} (target <= 1.3)")
    return res


# ----------------------------------------------------------------------------------- main


def main(argv: list[str]) -> int:
    if argv[:1] == ["--child-quarter"]:
        quarter_child(argv[1], argv[2])
        return 0
    if argv[:1] == ["--child-scaling"]:
        scaling_child(int(argv[1]), int(argv[2]), argv[3])
        return 0
    wanted = [a for a in argv if a in SECTIONS] or list(SECTIONS)
    unknown = [a for a in argv if a not in SECTIONS]
    if unknown:
        print(f"unknown sections {unknown}; choose from {SECTIONS}", file=sys.stderr)
        return 2
    tmp = Path(tempfile.mkdtemp(prefix="pqflow-bench-"))
    RESULTS.mkdir(parents=True, exist_ok=True)
    latest = RESULTS / "latest.json"
    previous = json.loads(latest.read_text()) if latest.exists() else {}
    results = previous.get("results", {}) if isinstance(previous.get("results"), dict) else {}
    try:
        for name in wanted:
            results[name] = {"bench_core": bench_core, "bench_parquet": bench_parquet,
                             "bench_quarter": bench_quarter, "bench_scaling": bench_scaling,
                             "bench_heston": bench_heston, "bench_cli": bench_cli}[f"bench_{name}"](tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    import pyarrow

    meta = {
        "python": platform.python_version(), "numpy": np.__version__, "pyarrow": pyarrow.__version__,
        "machine": platform.machine(), "cpus": os.cpu_count(),
        "load_average_at_end": os.getloadavg(), "when_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "OPENBLAS_CORETYPE": os.environ.get("OPENBLAS_CORETYPE"),
    }
    latest.write_text(json.dumps({"meta": meta, "results": results}, indent=2) + "\n")
    print(f"\nwritten to {latest}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
