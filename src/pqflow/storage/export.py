"""Export a slice of a finished run: chosen scenarios and columns, as CSV or Parquet.

The slice is streamed: only the parts that hold the chosen scenarios are opened, each is first
checked against the run's manifest (size and sha256; a changed or truncated part is reported by
name), and rows go from a pyarrow dataset scanner (filter on ``scenario``, projection on the
columns) to the writer batch by batch, so memory stays bounded by one batch whatever the size
of the set. The CSV layout is described in ``docs/export.md``.
"""

from __future__ import annotations

import json
import os
import re
import sys
import uuid
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, BinaryIO

import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.dataset as pads
import pyarrow.parquet as pq

from pqflow.errors import IntegrityError, PqflowError
from pqflow.storage.manifest import load_manifest
from pqflow.storage.parquet import KEY_COLUMNS, file_sha256, parquet_write_kwargs

__all__ = [
    "FORMATS",
    "ExportError",
    "ExportResult",
    "parse_scenario_range",
    "set_parts",
    "export_slice",
]

FORMATS = ("csv", "parquet")
_MEASURES = ("real_world", "market_consistent")
_BATCH_ROWS = 65_536


class ExportError(PqflowError):
    """An export was asked for something the run does not hold (measure, columns, scenarios)."""


@dataclass(frozen=True, kw_only=True)
class ExportResult:
    """What was written: row count, columns in order, scenario range ``[first, stop)``."""

    rows: int
    columns: tuple[str, ...]
    first_scenario: int
    stop_scenario: int
    parts_read: int
    out: str


def parse_scenario_range(text: str | None) -> tuple[int | None, int | None]:
    """``"a:b"`` -> ``(a, b)``: scenarios ``a`` to ``b - 1`` (half-open, like a Python slice);
    ``"a:"``, ``":b"``, and ``"a"`` (one scenario) are accepted; ``None`` means all."""
    if text is None or text.strip() in ("", ":"):
        return None, None
    m = re.fullmatch(r"\s*(\d*)\s*(:?)\s*(\d*)\s*", text)
    if not m or (not m.group(2) and not m.group(1)) or (not m.group(2) and m.group(3)):
        raise ExportError(
            f"--scenarios {text!r}: write FIRST:STOP with whole numbers (scenarios FIRST to "
            "STOP-1, e.g. 0:100), FIRST: or :STOP, or one scenario number"
        )
    first = int(m.group(1)) if m.group(1) else None
    if not m.group(2):
        if first is None:
            raise ExportError(f"--scenarios {text!r}: give FIRST, FIRST:STOP, FIRST: or :STOP")
        return first, first + 1
    stop = int(m.group(3)) if m.group(3) else None
    if first is not None and stop is not None and stop <= first:
        raise ExportError(f"--scenarios {text!r}: STOP must be greater than FIRST")
    return first, stop


def _scenario_span(path: Path) -> tuple[int, int]:
    """``[min, max]`` scenario number in a part, from its row-group statistics."""
    meta = pq.ParquetFile(path).metadata
    idx = meta.schema.names.index("scenario")
    lo, hi = None, None
    for rg in range(meta.num_row_groups):
        stats = meta.row_group(rg).column(idx).statistics
        if stats is None or not stats.has_min_max:
            table = pq.read_table(path, columns=["scenario"])
            col = table.column("scenario")
            return int(pc.min(col).as_py()), int(pc.max(col).as_py())
        lo = stats.min if lo is None else min(lo, stats.min)
        hi = stats.max if hi is None else max(hi, stats.max)
    if lo is None or hi is None:
        return 0, -1
    return int(lo), int(hi)


def _span_checked(run_dir: Path, entry: dict[str, Any]) -> tuple[int, int]:
    """A part's scenario span, after the cheap size check (the sha256 is checked when read)."""
    path = _check_size(run_dir, entry)
    try:
        return _scenario_span(path)
    except (pa.ArrowInvalid, OSError) as exc:
        raise IntegrityError(f"{entry['path']}: not a readable Parquet file ({exc})") from None


def set_parts(run_dir: str | Path, measure: str) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """The manifest and its entries for the parts of one set, in batch order (a run without a
    manifest is refused: only a finished run is read)."""
    run_dir = Path(run_dir)
    if measure not in _MEASURES:
        raise ExportError(f"unknown measure {measure!r}: use one of {', '.join(_MEASURES)}")
    manifest = load_manifest(run_dir)  # structure and paths checked: nothing outside the run is read
    prefix = f"scenarios/{measure}/"
    entries = sorted(
        (e for e in manifest["files"] if e["path"].startswith(prefix) and e["path"].endswith(".parquet")),
        key=lambda e: e["path"],
    )
    if not entries:
        raise ExportError(f"{run_dir}: the manifest lists no {measure} scenario parts")
    return manifest, entries


def _check_size(run_dir: Path, entry: dict[str, Any]) -> Path:
    path = run_dir / entry["path"]
    if not path.is_file():
        raise IntegrityError(f"{entry['path']}: missing (listed in manifest.json)")
    size = path.stat().st_size
    if size != entry["bytes"]:
        raise IntegrityError(f"{entry['path']}: size {size} bytes, manifest says {entry['bytes']}")
    return path


def _verify(run_dir: Path, entry: dict[str, Any]) -> Path:
    path = _check_size(run_dir, entry)
    if file_sha256(path) != entry["sha256"]:
        raise IntegrityError(f"{entry['path']}: content changed (sha256 differs from the manifest)")
    return path


class _Sink:
    """A file written under a temporary name and renamed into place when complete, or stdout."""

    def __init__(self, out: str | Path | None):
        self.final = Path(out) if out is not None else None
        self.tmp = None
        if self.final is not None:
            self.final.parent.mkdir(parents=True, exist_ok=True)
            self.tmp = self.final.with_name(f".{self.final.name}.tmp-{uuid.uuid4().hex[:12]}")

    def open(self) -> BinaryIO:
        if self.tmp is None:
            return sys.stdout.buffer
        return open(self.tmp, "wb")

    def commit(self) -> None:
        if self.tmp is not None and self.final is not None:
            os.replace(self.tmp, self.final)

    def abort(self) -> None:
        if self.tmp is not None:
            self.tmp.unlink(missing_ok=True)


def export_slice(
    run_dir: str | Path,
    *,
    measure: str,
    fmt: str = "csv",
    columns: Sequence[str] | None = None,
    scenarios: str | tuple[int | None, int | None] | None = None,
    out: str | Path | None = None,
    overwrite: bool = False,
) -> ExportResult:
    """Stream scenarios ``[first, stop)`` and ``columns`` of one set to ``out`` (CSV on standard
    output when ``out`` is ``None``; an existing ``out`` is replaced only with ``overwrite``).
    ``scenario`` and ``time`` always come first. Every part to be read is checked against the
    manifest before the first row is written. Raises
    ``ExportError`` for an unknown measure, column or scenario range and ``IntegrityError``
    when a part read does not match the manifest."""
    run_dir = Path(run_dir)
    if fmt not in FORMATS:
        raise ExportError(f"unknown format {fmt!r}: use one of {', '.join(FORMATS)}")
    if fmt == "parquet" and out is None:
        raise ExportError("a Parquet export needs --out FILE")
    if out is not None and not overwrite:
        for existing in (Path(out), Path(out).with_name(Path(out).name + ".meta.json")):
            if existing.exists():
                raise ExportError(f"{existing} exists; pass --overwrite to replace it")
    first, stop = parse_scenario_range(scenarios) if not isinstance(scenarios, tuple) else scenarios
    manifest, entries = set_parts(run_dir, measure)
    spans = [(_span_checked(run_dir, e), e) for e in entries]
    n_set = max(hi for (_, hi), _ in spans) + 1
    first = 0 if first is None else first
    stop = n_set if stop is None else stop
    if first >= n_set or stop > n_set:
        raise ExportError(
            f"scenarios {first}:{stop} asked, but the {measure} set has {n_set} scenarios "
            f"(0 to {n_set - 1})"
        )
    schema = pq.read_schema(run_dir / entries[0]["path"])
    available = [c for c in schema.names if c not in KEY_COLUMNS]
    chosen = list(available) if columns is None else list(dict.fromkeys(columns))
    unknown = [c for c in chosen if c not in schema.names]
    if unknown:
        raise ExportError(
            f"unknown column(s) {', '.join(unknown)} in the {measure} set; available: "
            f"{', '.join(available)}"
        )
    projection = [*KEY_COLUMNS, *[c for c in chosen if c not in KEY_COLUMNS]]
    chosen_parts = [e for (lo, hi), e in spans if hi >= first and lo < stop]
    for entry in chosen_parts:  # every part checked before the first row goes out
        _verify(run_dir, entry)
    out_schema = pa.schema([schema.field(c) for c in projection], metadata=schema.metadata)

    sink = _Sink(out)
    rows = 0
    try:
        fh = sink.open()
        try:
            if fmt == "csv":
                writer: Any = pacsv.CSVWriter(
                    fh, out_schema.remove_metadata(), write_options=pacsv.WriteOptions(include_header=True,
                                                                                       quoting_header="none")
                )
            else:
                kwargs = parquet_write_kwargs(out_schema)
                kwargs.pop("row_group_size")
                writer = pq.ParquetWriter(fh, out_schema, **kwargs)
            for batch in _batches(run_dir, chosen_parts, projection, first, stop):
                writer.write_batch(batch.replace_schema_metadata(None) if fmt == "csv" else batch)
                rows += batch.num_rows
            writer.close()
        finally:
            if fh is not sys.stdout.buffer:
                fh.close()
            else:
                fh.flush()
        sink.commit()
    except BaseException:
        sink.abort()
        raise
    if out is not None:
        _write_sidecar(Path(out), run_dir, manifest, measure, schema, projection, first, stop, rows, fmt)
    return ExportResult(
        rows=rows,
        columns=tuple(projection),
        first_scenario=first,
        stop_scenario=stop,
        parts_read=len(chosen_parts),
        out=str(out) if out is not None else "-",
    )


def _batches(
    run_dir: Path, entries: list[dict[str, Any]], projection: list[str], first: int, stop: int
) -> Iterator[pa.RecordBatch]:
    scen = pads.field("scenario")
    flt = (scen >= first) & (scen < stop)
    for entry in entries:  # one part at a time, in batch order: rows stay sorted
        path = _verify(run_dir, entry)
        scanner = pads.dataset(path, format="parquet").scanner(
            columns=projection, filter=flt, batch_size=_BATCH_ROWS, use_threads=False
        )
        for batch in scanner.to_batches():
            if batch.num_rows:
                yield batch


def _write_sidecar(
    out: Path,
    run_dir: Path,
    manifest: dict[str, Any],
    measure: str,
    schema: pa.Schema,
    projection: list[str],
    first: int,
    stop: int,
    rows: int,
    fmt: str,
) -> None:
    meta = {k.decode(): v.decode() for k, v in (schema.metadata or {}).items()}
    units = json.loads(meta.get("pqflow.units", "{}"))
    units.setdefault("scenario", "scenario number, 0 .. N-1 across the set")
    units.setdefault("time", meta.get("pqflow.time_unit", "years from the valuation date"))
    body = {
        "file": out.name,
        "format": fmt,
        "layout": "long: one row per (scenario, time), sorted by scenario then time; header row",
        "source_run": str(run_dir),
        "run_id": manifest.get("run_id"),
        "measure": measure,
        "measure_description": meta.get("pqflow.measure_description"),
        "valuation_date": meta.get("pqflow.valuation_date"),
        "scenarios": {"first": first, "stop": stop, "note": "scenarios first .. stop-1"},
        "rows": rows,
        "columns": [{"name": c, "unit": units.get(c, "")} for c in projection],
        "compounding": meta.get("pqflow.compounding"),
        "caution": manifest.get("caution"),
    }
    from pqflow.storage.jsonio import write_json_atomic

    write_json_atomic(out.with_name(out.name + ".meta.json"), body)
