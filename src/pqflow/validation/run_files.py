"""What the checks may read of a run: its ``calibration.json`` and its scenario parts.

Every check of :mod:`pqflow.validation` is computed from the written files, never from the
model's internals: the scenario parts through :class:`ScenarioSetReader` and the calibration
record through :func:`load_run_inputs`. The helpers here stream the parts one at a time
(running moments of derived quantities) or gather a few columns at a few times (for
percentiles), so a check over a large set keeps little in memory.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from pqflow.errors import IntegrityError
from pqflow.market.curve import DiscountCurve
from pqflow.market.serialize import curve_from_json
from pqflow.storage.jsonio import read_json
from pqflow.validation.mean_tests import CellMoments
from pqflow.validation.moments import Moments, sampling_units
from pqflow.validation.reader import ScenarioSetReader

__all__ = [
    "RunInputs",
    "load_run_inputs",
    "time_index",
    "stream_moments",
    "stream_cells",
    "gather_at_times",
    "json_safe",
    "MEASURE_LABEL",
]

MEASURE_LABEL = {"market_consistent": "market consistent (Q)", "real_world": "real world (P)"}
_TIME_TOL = 1e-9


@dataclass(frozen=True, kw_only=True)
class RunInputs:
    """A run directory with its calibration record read and today's curve rebuilt from it."""

    run_dir: Path
    calibration: dict[str, Any]
    curve: DiscountCurve

    def reader(self, measure: str) -> ScenarioSetReader:
        return ScenarioSetReader(run_dir=self.run_dir, measure=measure)

    @property
    def parameters(self) -> dict[str, Any]:
        return self.calibration.get("parameters", {})

    @property
    def rates_drivers(self) -> tuple[str, ...]:
        """The rate drivers of the recorded model (G2++ has two)."""
        return ("rates_x", "rates_y") if "g2pp" in self.parameters else ("rates",)


def load_run_inputs(run_dir: str | Path) -> RunInputs:
    """Read ``calibration.json`` of a run; today's curve is rebuilt from its stored form."""
    run_dir = Path(run_dir)
    path = run_dir / "calibration.json"
    if not path.is_file():
        raise IntegrityError(f"{run_dir}: no calibration.json; not a pqflow run directory")
    data = read_json(path)
    try:
        curve = curve_from_json(data["parameters"]["curve"])
    except (KeyError, TypeError, ValueError) as exc:
        raise IntegrityError(f"{path}: no usable parameters.curve ({exc!r})") from None
    return RunInputs(run_dir=run_dir, calibration=data, curve=curve)


def time_index(times: np.ndarray, t: float) -> int | None:
    """Index of the output time equal to ``t`` (to 1e-9 years), or ``None``."""
    k = int(np.argmin(np.abs(times - t))) if times.size else 0
    return k if times.size and abs(float(times[k]) - t) <= _TIME_TOL * max(1.0, abs(t)) else None


def stream_moments(
    reader: ScenarioSetReader,
    columns: Sequence[str],
    derive: Callable[[np.ndarray, dict[str, np.ndarray]], Mapping[str, np.ndarray]],
) -> tuple[np.ndarray, dict[str, Moments]]:
    """Running means and variances of derived quantities, one part at a time.

    ``derive(times, cols)`` gets the output times ``(n_times,)`` and the requested columns,
    each ``(n_paths, n_times)``, and returns named samples of shape ``(n_paths, k)`` (any
    ``k``, fixed per name). Antithetic pairs are averaged before the moments (independent
    sampling units), so the standard errors are right under antithetic sampling.
    """
    antithetic = reader.antithetic
    acc: dict[str, Moments] = {}
    times = None
    for times, cols in reader.iter_arrays(list(dict.fromkeys(columns))):
        for name, values in derive(times, cols).items():
            values = np.asarray(values, dtype=float)
            if values.ndim == 1:
                values = values[:, None]
            m = Moments.of(sampling_units(values, antithetic))
            acc[name] = m if name not in acc else acc[name].merge(m)
    if times is None:
        raise IntegrityError(f"{reader.set_dir}: no scenario parts found")
    return times, acc


def stream_cells(
    reader: ScenarioSetReader,
    columns: Sequence[str],
    derive: Callable[[np.ndarray, dict[str, np.ndarray]], Mapping[str, np.ndarray]],
) -> tuple[np.ndarray, dict[str, CellMoments]]:
    """As :func:`stream_moments`, with the moments the tests of a mean need
    (:class:`pqflow.validation.mean_tests.CellMoments`: also of ``log X``)."""
    antithetic = reader.antithetic
    acc: dict[str, CellMoments] = {}
    times = None
    for times, cols in reader.iter_arrays(list(dict.fromkeys(columns))):
        for name, values in derive(times, cols).items():
            values = np.asarray(values, dtype=float)
            if values.ndim == 1:
                values = values[:, None]
            prev = acc.get(name)
            m = CellMoments.of(values, antithetic, None if prev is None else prev.shift)
            acc[name] = m if prev is None else prev.merge(m)
    if times is None:
        raise IntegrityError(f"{reader.set_dir}: no scenario parts found")
    return times, acc


def gather_at_times(
    reader: ScenarioSetReader, columns: Sequence[str], at: Sequence[float] | None = None
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Every path of ``columns`` at the output times ``at`` (all times if ``None``).

    Returns ``(times_kept, {column: (n_paths_total, len(times_kept))})``; requested times
    that are not output times are left out.
    """
    chunks: dict[str, list[np.ndarray]] = {c: [] for c in columns}
    keep = None
    times = None
    for times, cols in reader.iter_arrays(list(dict.fromkeys(columns))):
        if keep is None:
            if at is None:
                keep = np.arange(times.size)
            else:
                found = [time_index(times, float(t)) for t in at]
                keep = np.array(sorted({k for k in found if k is not None}), dtype=int)
        for c in columns:
            chunks[c].append(cols[c][:, keep])
    if times is None or keep is None:
        raise IntegrityError(f"{reader.set_dir}: no scenario parts found")
    return times[keep], {c: np.concatenate(v, axis=0) for c, v in chunks.items()}


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
