"""Step-wise attribution of the change in liability values between two runs.

Start from the old run's configuration and replace one group of inputs at a time, in this
order (:data:`STEPS`):

1. ``curve``: today's curve (its file or typed pillars and the extrapolation settings);
2. ``rate_volatilities``: swaptions and the rate model's settings;
3. ``equity``: equity index levels, yields and volatilities (files, ``[equity]``, the indices
   apart from their risk premia);
4. ``house_view``: the real-world assumptions (``[real_world]`` and the indices' risk premia);
5. ``other_parts``: everything else the model uses (inflation, credit, correlations, the other
   calibration and output settings);
6. ``time_roll``: the valuation date, where the two dates differ;
7. ``simulation``: the simulation settings and seed, where they differ.

Each intermediate configuration is recalibrated and simulated with the old run's seed and
scenario count (common random numbers), and the portfolio revalued; the step's change is the
difference from the previous step, its standard error that of the per-unit differences
(:mod:`pqflow.liabilities.paired`). The changes telescope: step 0 is the old configuration
rerun, the last step is the new configuration, so the steps add up to the total change (to
floating-point rounding). The runs themselves are made by ``pipeline/attribution.py``; this
module holds the pure parts: the configurations of the steps and the table of changes.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from pqflow.config.loader import apply_overrides, config_hash, load_config
from pqflow.config.schema import RunConfig
from pqflow.errors import PqflowError
from pqflow.storage.manifest import ManifestRecord
from pqflow.storage.parquet import file_sha256

__all__ = ["STEPS", "Step", "step_configs", "attribution_rows", "load_run_config", "check_attribution",
           "prepare_attribution", "summarise_attribution", "PlannedStep"]

_MARKET_KINDS = ("curve", "swaptions", "equity_index", "equity_vols", "correlations", "inflation_swaps",
                 "inflation_caps", "credit_spreads")


@dataclass(frozen=True)
class Step:
    name: str
    title: str
    sections: tuple[str, ...]  # top-level keys, or "calibration.hull_white" style sub-keys
    files: tuple[str, ...]  # market_data kinds


STEPS = (
    Step("curve", "curve", ("curve", "curve_extrapolation"), ("curve",)),
    Step("rate_volatilities", "rate volatilities", ("rates", "hull_white", "g2pp", "calibration.hull_white",
                                                    "calibration.g2pp"), ("swaptions",)),
    Step("equity", "equity volatilities and levels", ("equity",), ("equity_index", "equity_vols")),
    Step("house_view", "house view", ("real_world",), ()),
    Step("other_parts", "other parts", (), ("correlations", "inflation_swaps", "inflation_caps", "credit_spreads")),
    Step("time_roll", "time roll (valuation date)", ("run.valuation_date",), ()),
    Step("simulation", "simulation settings and seed", ("simulation",), ()),
)
_CLAIMED = {"run", "simulation", "execution", "signoff", "market_data", "indices", "calibration",
            *(s.split(".")[0] for st in STEPS for s in st.sections)}


def load_run_config(config_path: str | Path, manifest: ManifestRecord) -> RunConfig:
    """The configuration a run was made with: the file, with the scenario count and seed the
    manifest records (a run may have overridden them), checked against the manifest's hash."""
    cfg = load_config(config_path)
    scen = (manifest.scenarios or {}).get("market_consistent")
    seed = manifest.root_seed
    if (scen is not None and scen != cfg.simulation.scenarios) or (seed is not None and seed != cfg.simulation.seed):
        cfg = apply_overrides(cfg, scenarios=scen, seed=seed, source=str(config_path))
    want = manifest.config_sha256
    if want is not None and config_hash(cfg) != want:
        raise PqflowError(
            f"{config_path}: this configuration did not make run {manifest.run_name!r} (its sha256 differs "
            "from the run's manifest); give the configuration file the run was made with"
        )
    return cfg


def _plain(cfg: RunConfig) -> dict[str, Any]:
    """The configuration as data, market-data paths made absolute (the steps mix folders)."""
    data = cfg.model_dump(mode="json")
    if data.get("market_data"):
        for kind in _MARKET_KINDS:
            path = cfg.market_file(kind)
            if path is not None:
                data["market_data"][kind] = str(Path(path).absolute())
    return data


def _clean(obj: Any) -> Any:
    """Without ``None`` values (absent and ``None`` mean the same in a configuration)."""
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items() if v is not None}
    if isinstance(obj, list):
        return [_clean(v) for v in obj]
    return obj


def _get(d: dict[str, Any], path: str) -> Any:
    for part in path.split("."):
        if not isinstance(d, dict) or part not in d:
            return None
        d = d[part]
    return d


def _set(d: dict[str, Any], path: str, value: Any) -> None:
    parts = path.split(".")
    for part in parts[:-1]:
        d = d.setdefault(part, {})
    if value is None:
        d.pop(parts[-1], None)
    else:
        d[parts[-1]] = copy.deepcopy(value)


def _indices(old: list[dict[str, Any]] | None, new: list[dict[str, Any]] | None, *, premia_from_new: bool) -> Any:
    old_premia = {i.get("name"): i.get("risk_premium") for i in old or []}
    out = copy.deepcopy(new or [])
    if not premia_from_new:
        for item in out:
            if item.get("name") in old_premia and old_premia[item["name"]] is not None:
                item["risk_premium"] = old_premia[item["name"]]
    return out


def step_configs(old: RunConfig, new: RunConfig) -> list[tuple[Step | None, dict[str, Any]]]:
    """The configuration (as data) after each step: first the old one itself, then one per step
    that changes anything (a step whose inputs agree in both runs is left out)."""
    a, b = _clean(_plain(old)), _clean(_plain(new))
    for kind in _MARKET_KINDS:  # the same bytes in another folder is no change of input
        pa, pb = _get(a, f"market_data.{kind}"), _get(b, f"market_data.{kind}")
        if pa and pb and pa != pb and Path(pa).is_file() and Path(pb).is_file() and \
                file_sha256(Path(pa)) == file_sha256(Path(pb)):
            b["market_data"][kind] = pa
    other_keys = sorted((set(a) | set(b)) - _CLAIMED)
    out: list[tuple[Step | None, dict[str, Any]]] = [(None, copy.deepcopy(a))]
    current = copy.deepcopy(a)
    for step in STEPS:
        nxt = copy.deepcopy(current)
        sections = list(step.sections)
        if step.name == "other_parts":
            sections += other_keys
            cal_keys = (set(a.get("calibration") or {}) | set(b.get("calibration") or {})) - {"hull_white", "g2pp"}
            sections += [f"calibration.{k}" for k in sorted(cal_keys)]
            sections += ["outputs", "validation"]
        for sec in sections:
            _set(nxt, sec, _get(b, sec))
        for kind in step.files:
            _set(nxt, f"market_data.{kind}", _get(b, f"market_data.{kind}"))
        if nxt.get("market_data") == {}:
            nxt.pop("market_data")
        if step.name == "equity":
            nxt["indices"] = _indices(a.get("indices"), b.get("indices"), premia_from_new=False)
        if step.name == "house_view":
            nxt["indices"] = _indices(a.get("indices"), b.get("indices"), premia_from_new=True)
        if nxt != current:
            out.append((step, nxt))
            current = nxt
    for k, (done, data) in enumerate(out):
        data["run"]["name"] = f"attribution-{k:02d}-{done.name if done else 'old_inputs'}"
        data.pop("signoff", None)
    return out


def attribution_rows(
    steps: list[tuple[str, str]], units: list[Any], ce: list[dict[str, float]], *, old_value: dict[str,
                                                                                                   float] | None = None,
    new_value: dict[str, float] | None = None,
) -> dict[str, Any]:
    """The table of changes: per step and line, the change in best estimate and TVOG with the
    standard errors of the paired differences, the total, and the check that the steps add up.

    ``steps``: (name, title) from step 0 (the old inputs); ``units``: the
    :class:`~pqflow.liabilities.paired.UnitValues` of each step's market-consistent set; ``ce``:
    each step's certainty-equivalent best estimate by line.
    """
    from pqflow.liabilities.paired import paired_difference

    labels = [lab for lab, lev in zip(units[0].labels, units[0].levels, strict=True) if lev in ("product", "total")]
    idx = [units[0].labels.index(lab) for lab in labels]
    rows = []
    be0 = units[0].mean()[:, 0]
    for k in range(1, len(units)):
        d, se, paired = paired_difference(units[k - 1], units[k])
        for g, lab in zip(idx, labels, strict=True):
            d_ce = ce[k][lab] - ce[k - 1][lab]
            rows.append({"step": k, "name": steps[k][0], "title": steps[k][1], "line": lab,
                         "best_estimate_change": float(d[g, 0]), "best_estimate_se": float(se[g, 0]),
                         "tvog_change": float(d[g, 0] - d_ce), "tvog_se": float(se[g, 0]),
                         "guarantee_change": float(d[g, 1]), "guarantee_se": float(se[g, 1]),
                         "paired": paired})
    be_last = units[-1].mean()[:, 0]
    totals = {}
    for g, lab in zip(idx, labels, strict=True):
        total = float(be_last[g] - be0[g])
        tvog_total = float((be_last[g] - ce[-1][lab]) - (be0[g] - ce[0][lab]))
        steps_sum = float(sum(r["best_estimate_change"] for r in rows if r["line"] == lab))
        tvog_sum = float(sum(r["tvog_change"] for r in rows if r["line"] == lab))
        totals[lab] = {"best_estimate_total": total, "best_estimate_sum_of_steps": steps_sum,
                       "tvog_total": tvog_total, "tvog_sum_of_steps": tvog_sum,
                       "start_best_estimate": float(be0[g]), "end_best_estimate": float(be_last[g])}
    checks = {}
    if old_value is not None:
        checks["reproduces_old_run"] = all(np.isclose(totals[lab]["start_best_estimate"], old_value[lab], rtol=1e-9,
                                                      atol=1e-6)
                                           for lab in labels if lab in old_value)
    if new_value is not None:
        checks["reproduces_new_run"] = all(np.isclose(totals[lab]["end_best_estimate"], new_value[lab], rtol=1e-9,
                                                      atol=1e-6)
                                           for lab in labels if lab in new_value)
    return {"steps": [{"step": k, "name": n, "title": t} for k, (n, t) in enumerate(steps)],
            "rows": rows, "totals": totals, "checks": checks, "lines": labels}


def check_attribution(old_run: str | Path, new_run: str | Path, old_config: str | Path, new_config: str | Path,
                      out_dir: str | Path) -> tuple[RunConfig, RunConfig]:
    """Every input error of an attribution, before anything runs: both runs finished, each
    configuration the one its run was made with, the output folder new."""
    from pqflow.storage.manifest import MANIFEST, read_manifest

    out = Path(out_dir)
    if out.exists():
        raise PqflowError(f"{out} exists; choose another --attribution-dir "
                          "(an attribution is not written over another)")
    manifests = []
    for run in (old_run, new_run):
        path = Path(run) / MANIFEST
        if not path.is_file():
            raise PqflowError(f"{run}: no manifest.json; attribution needs two finished runs")
        manifests.append(read_manifest(run))
    old = load_run_config(old_config, manifests[0])
    new = load_run_config(new_config, manifests[1])
    from pqflow.config.loader import parse_config

    for step, data in step_configs(old, new):  # a mixture the schema refuses surfaces here
        parse_config(data, source=f"attribution step {step.name if step else 'old inputs'}")
    return old, new


@dataclass(frozen=True)
class PlannedStep:
    index: int
    name: str
    title: str
    config: Path
    run_dir: Path


def prepare_attribution(old_run: str | Path, new_run: str | Path, old_config: str | Path, new_config: str | Path,
                        out_dir: str | Path) -> list[PlannedStep]:
    """Check both configurations against their runs, write each step's configuration into
    ``out_dir/configs`` and return the steps (their runs go to ``out_dir/steps``). Refuses an
    existing ``out_dir``: an attribution is never written over another."""
    from pqflow.config.writer import write_config_toml

    out = Path(out_dir)
    old, new = check_attribution(old_run, new_run, old_config, new_config, out_dir)
    planned = []
    for k, (step, data) in enumerate(step_configs(old, new)):
        name = step.name if step else "old_inputs"
        cfg = write_config_toml(out / "configs" / f"{k:02d}-{name}.toml", data)
        planned.append(PlannedStep(index=k, name=name, title=step.title if step else "old inputs (rerun)",
                                   config=cfg, run_dir=out / "steps" / f"{k:02d}-{name}"))
    return planned


def _line_values(valuation: Path, kind: str) -> dict[str, float]:
    """Best estimate per line of the valuation summary at ``valuation``. The attribution works
    with plain means (its steps are paired differences of them), so it compares with the
    valuation's plain mean where one is recorded (the published value then carries control
    variates)."""
    from pqflow.storage.valuation_summary import read_valuation_summary

    return read_valuation_summary(valuation).best_estimates(kind, plain=True)


def summarise_attribution(old_run: str | Path, new_run: str | Path, planned: list[PlannedStep],
                          liabilities: str | Path, out_dir: str | Path) -> dict[str, Any]:
    """After every step's run was valued: the table of changes, written to
    ``out_dir/attribution.json`` and ``attribution.csv``."""
    import pandas as pd

    from pqflow.liabilities.paired import unit_values
    from pqflow.storage.jsonio import write_json_atomic
    from pqflow.storage.results import write_csv_atomic
    from pqflow.storage.valuation_summary import CERTAINTY_EQUIVALENT, MARKET_CONSISTENT, VALUATION_SUMMARY

    units = [unit_values(p.run_dir, liabilities) for p in planned]
    ce = [_line_values(p.run_dir / VALUATION_SUMMARY, CERTAINTY_EQUIVALENT) for p in planned]
    old_val = Path(old_run) / VALUATION_SUMMARY
    new_val = Path(new_run) / VALUATION_SUMMARY
    result = attribution_rows(
        [(p.name, p.title) for p in planned], units, ce,
        old_value=_line_values(old_val, MARKET_CONSISTENT) if old_val.is_file() else None,
        new_value=_line_values(new_val, MARKET_CONSISTENT) if new_val.is_file() else None,
    )
    result["order"] = [s.name for s in STEPS]
    result["folder"] = {"configs": "configs", "steps": [f"steps/{p.run_dir.name}" for p in planned]}
    result["rule"] = ("each step replaces one group of inputs of the previous step by the new run's, recalibrates "
                      "and revalues with the old run's seeds and scenario count (common random numbers); SE: of "
                      "the per-unit differences; the steps add up to the total change")
    out = Path(out_dir)
    write_json_atomic(out / "attribution.json", result)
    write_csv_atomic(pd.DataFrame(result["rows"]), out / "attribution.csv")
    return result
