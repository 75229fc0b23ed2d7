"""`make bench`: simulation speed in path-steps per second for each scenario set.

Runs the library's simulation core (no Prefect, no disk) on the demo calibration and prints a
table; writes the figures to benchmarks/results/latest.json. Not part of `make test`.
"""

from __future__ import annotations

import json
import platform
import sys
import time
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]


def _time(fn, repeats: int = 3) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def simulation_speed() -> list[dict]:
    from pqflow.calibration import assemble_calibration, build_model
    from pqflow.config import load_config
    from pqflow.simulation import batch_generator, simulate_batch, time_grid

    cfg = load_config(REPO / "scenario_configs" / "demo.toml")
    cal = assemble_calibration(cfg)
    model = build_model(cal, tuple(cfg.outputs.bond_maturities))
    rows = []
    for label, horizon, spy, n in (("annual, 50 years", 50, 1, 10_000), ("monthly, 50 years", 50, 12, 2_000)):
        times = time_grid(horizon, spy)
        for measure in ("real_world", "market_consistent"):
            seconds = _time(
                lambda: simulate_batch(
                    model, times, measure=measure, n_paths=n,
                    rng=batch_generator(1, measure, 0), antithetic=True,
                )
            )
            steps = n * (times.size - 1)
            rows.append({
                "benchmark": "simulation core (all output columns)",
                "grid": label, "measure": measure, "paths": n, "path_steps": steps,
                "seconds": seconds, "path_steps_per_second": steps / seconds,
            })
    return rows


def main() -> int:
    rows = simulation_speed()
    width = max(len(r["grid"]) for r in rows)
    print(f"{'grid':<{width}}  {'measure':<18} {'paths':>7} {'seconds':>8} {'path-steps/s':>14}")
    for r in rows:
        print(f"{r['grid']:<{width}}  {r['measure']:<18} {r['paths']:>7} {r['seconds']:>8.3f} {r['path_steps_per_second']:>14,.0f}")
    out = REPO / "benchmarks" / "results"
    out.mkdir(parents=True, exist_ok=True)
    meta = {"python": platform.python_version(), "numpy": np.__version__, "machine": platform.machine()}
    (out / "latest.json").write_text(json.dumps({"meta": meta, "results": rows}, indent=2) + "\n")
    print(f"written to {out / 'latest.json'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
