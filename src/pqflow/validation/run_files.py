"""What the checks may read of a run: its ``calibration.json`` and its scenario parts.

Every check of :mod:`pqflow.validation` is computed from the written files, never from the
model's internals: the scenario parts through :class:`pqflow.storage.scenario_set.ScenarioSet`
and the calibration record through :func:`load_run_inputs`. The helpers here stream the parts
one at a time (running moments of derived quantities) or gather a few columns at a few times
(for percentiles), so a check over a large set keeps little in memory.

Every check is also written as *steps* (a generator: it registers its readers on the sets'
passes with :func:`add_moments`, :func:`add_cells` and :func:`add_gather`, yields, and
computes its result once the parts have been read). :func:`run_steps` over :func:`all_steps`
of every check reads each part of a set once for all of them; the plain functions
(:func:`stream_moments`, ...) are the same readers on a pass of their own.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Generator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar

import numpy as np

from pqflow.errors import ConfigError, IntegrityError
from pqflow.market.curve import DiscountCurve
from pqflow.market.serialize import curve_from_json
from pqflow.storage.calibration_file import CalibrationRecord, calibration_path, calibration_record
from pqflow.storage.jsonio import read_json
from pqflow.storage.scenario_set import ScenarioSet, SetPass
from pqflow.validation.mean_tests import CellMoments
from pqflow.validation.moments import Moments, sampling_units

__all__ = [
    "RunInputs",
    "load_run_inputs",
    "time_index",
    "stream_moments",
    "stream_cells",
    "gather_at_times",
    "add_moments",
    "add_cells",
    "add_gather",
    "all_steps",
    "run_steps",
    "set_passes",
    "Steps",
    "json_safe",
    "MEASURE_LABEL",
]

T = TypeVar("T")
MEASURE_LABEL = {"market_consistent": "market consistent (Q)", "real_world": "real world (P)"}
_TIME_TOL = 1e-9


@dataclass(frozen=True, kw_only=True)
class RunInputs:
    """A run directory with its calibration record read and today's curve rebuilt from it."""

    run_dir: Path
    calibration: dict[str, Any]
    curve: DiscountCurve

    def reader(self, measure: str) -> ScenarioSet:
        return ScenarioSet(run_dir=self.run_dir, measure=measure)

    @property
    def record(self) -> CalibrationRecord:
        """The calibration record, read through storage (version checked, the file named)."""
        return calibration_record(self.calibration, calibration_path(self.run_dir))

    @property
    def rates_drivers(self) -> tuple[str, ...]:
        """The rate drivers of the recorded model (G2++ has two)."""
        return ("rates_x", "rates_y") if self.record.g2pp is not None else ("rates",)


def load_run_inputs(run_dir: str | Path) -> RunInputs:
    """Read ``calibration.json`` of a run; today's curve is rebuilt from its stored form."""
    run_dir = Path(run_dir)
    path = calibration_path(run_dir)
    if not path.is_file():
        raise IntegrityError(f"{run_dir}: no {path.name}; not a pqflow run directory")
    data = read_json(path)
    record = calibration_record(data, path)  # a version this pqflow does not read: ConfigError naming the file
    try:
        curve = curve_from_json(record.curve)
    except (ConfigError, KeyError, TypeError, ValueError) as exc:
        raise IntegrityError(f"{path}: no usable parameters.curve ({exc!r})") from None
    return RunInputs(run_dir=run_dir, calibration=data, curve=curve)


def time_index(times: np.ndarray, t: float) -> int | None:
    """Index of the output time equal to ``t`` (to 1e-9 years), or ``None``."""
    k = int(np.argmin(np.abs(times - t))) if times.size else 0
    return k if times.size and abs(float(times[k]) - t) <= _TIME_TOL * max(1.0, abs(t)) else None


Derive = Callable[[np.ndarray, dict[str, np.ndarray]], Mapping[str, np.ndarray]]
#: A check computed in one pass over the sets: a generator that registers its readers on the
#: passes, yields while the parts are read, and returns its result (:func:`run_steps`).
Steps = Generator[None, None, T]


A = TypeVar("A", Moments, CellMoments)


def _add_accumulator(
    scan: SetPass, columns: Sequence[str], derive: Derive,
    accumulate: Callable[[np.ndarray, A | None], A],
) -> Callable[[], tuple[np.ndarray, dict[str, A]]]:
    """Register on a pass one running accumulator per quantity ``derive`` returns (values
    ``(n_paths,)`` or ``(n_paths, k)``); ``accumulate(values, previous)`` merges a part's values
    into what the earlier parts gave. The returned function gives the last part's times and the
    accumulators once the pass has run."""
    acc: dict[str, A] = {}
    seen: list[np.ndarray] = []

    def feed(times: np.ndarray, cols: dict[str, np.ndarray]) -> None:
        for name, values in derive(times, cols).items():
            values = np.asarray(values, dtype=float)
            if values.ndim == 1:
                values = values[:, None]
            acc[name] = accumulate(values, acc.get(name))
        seen[:] = [times]

    scan.add(columns, feed)

    def result() -> tuple[np.ndarray, dict[str, A]]:
        if not seen:
            raise IntegrityError(f"{scan.scenario_set.set_dir}: no scenario parts found")
        return seen[0], acc

    return result


def add_moments(
    scan: SetPass, columns: Sequence[str], derive: Derive
) -> Callable[[], tuple[np.ndarray, dict[str, Moments]]]:
    """Register :func:`stream_moments` on a pass; the returned function gives its result once
    the pass has run."""
    antithetic = scan.scenario_set.antithetic

    def accumulate(values: np.ndarray, prev: Moments | None) -> Moments:
        m = Moments.of(sampling_units(values, antithetic))
        return m if prev is None else prev.merge(m)

    return _add_accumulator(scan, columns, derive, accumulate)


def add_cells(
    scan: SetPass, columns: Sequence[str], derive: Derive
) -> Callable[[], tuple[np.ndarray, dict[str, CellMoments]]]:
    """Register :func:`stream_cells` on a pass (as :func:`add_moments`)."""
    antithetic = scan.scenario_set.antithetic

    def accumulate(values: np.ndarray, prev: CellMoments | None) -> CellMoments:
        m = CellMoments.of(values, antithetic, None if prev is None else prev.shift)
        return m if prev is None else prev.merge(m)

    return _add_accumulator(scan, columns, derive, accumulate)


def add_gather(
    scan: SetPass, columns: Sequence[str], at: Sequence[float] | None = None
) -> Callable[[], tuple[np.ndarray, dict[str, np.ndarray]]]:
    """Register :func:`gather_at_times` on a pass (as :func:`add_moments`)."""
    chunks: dict[str, list[np.ndarray]] = {c: [] for c in columns}
    state: dict[str, np.ndarray] = {}

    def feed(times: np.ndarray, cols: dict[str, np.ndarray]) -> None:
        if "keep" not in state:
            if at is None:
                state["keep"] = np.arange(times.size)
            else:
                found = [time_index(times, float(t)) for t in at]
                state["keep"] = np.array(sorted({k for k in found if k is not None}), dtype=int)
        keep = state["keep"]
        for c in columns:
            chunks[c].append(cols[c][:, keep])
        state["times"] = times

    scan.add(columns, feed)

    def result() -> tuple[np.ndarray, dict[str, np.ndarray]]:
        if "times" not in state:
            raise IntegrityError(f"{scan.scenario_set.set_dir}: no scenario parts found")
        return state["times"][state["keep"]], {c: np.concatenate(v, axis=0) for c, v in chunks.items()}

    return result


def all_steps(steps: Sequence[Steps[Any]]) -> Steps[list[Any]]:
    """Several checks as one: each registers its readers, the passes run once for all of
    them (this generator yields), and their results come back in order."""
    results: list[Any] = [None] * len(steps)
    active = []
    for i, step in enumerate(steps):
        try:
            next(step)
            active.append(i)
        except StopIteration as stop:
            results[i] = stop.value
    while active:
        yield
        still = []
        for i in active:
            try:
                next(steps[i])
                still.append(i)
            except StopIteration as stop:
                results[i] = stop.value
        active = still
    return results


def run_steps(passes: Mapping[str, SetPass], step: Steps[T]) -> T:
    """Drive a check (or :func:`all_steps` of several): between its yields, every set's pass
    reads its parts once for every reader registered on it."""
    while True:
        try:
            next(step)
        except StopIteration as stop:
            return stop.value
        for scan in passes.values():
            scan.run()


def set_passes(inputs: RunInputs, measures: Sequence[str] = ("market_consistent", "real_world")) -> dict[str, SetPass]:
    """One pass per scenario set of a run."""
    return {m: SetPass(scenario_set=inputs.reader(m)) for m in measures}


def stream_moments(
    reader: ScenarioSet,
    columns: Sequence[str],
    derive: Derive,
) -> tuple[np.ndarray, dict[str, Moments]]:
    """Running means and variances of derived quantities, one part at a time.

    ``derive(times, cols)`` gets the output times ``(n_times,)`` and the requested columns,
    each ``(n_paths, n_times)``, and returns named samples of shape ``(n_paths, k)`` (any
    ``k``, fixed per name). Antithetic pairs are averaged before the moments (independent
    sampling units), so the standard errors are right under antithetic sampling.
    """
    scan = SetPass(scenario_set=reader)
    result = add_moments(scan, columns, derive)
    scan.run()
    return result()


def stream_cells(
    reader: ScenarioSet,
    columns: Sequence[str],
    derive: Derive,
) -> tuple[np.ndarray, dict[str, CellMoments]]:
    """As :func:`stream_moments`, with the moments the tests of a mean need
    (:class:`pqflow.validation.mean_tests.CellMoments`: also of ``log X``)."""
    scan = SetPass(scenario_set=reader)
    result = add_cells(scan, columns, derive)
    scan.run()
    return result()


def gather_at_times(
    reader: ScenarioSet, columns: Sequence[str], at: Sequence[float] | None = None
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Every path of ``columns`` at the output times ``at`` (all times if ``None``).

    Returns ``(times_kept, {column: (n_paths_total, len(times_kept))})``; requested times
    that are not output times are left out.
    """
    scan = SetPass(scenario_set=reader)
    result = add_gather(scan, columns, at)
    scan.run()
    return result()


def json_safe(obj: Any) -> Any:
    """Plain JSON types: numpy scalars and arrays unwrapped, NaN and infinities as ``None``."""
    if isinstance(obj, Mapping):
        return {str(k): json_safe(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_safe(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [json_safe(v) for v in obj.tolist()]
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    return obj
