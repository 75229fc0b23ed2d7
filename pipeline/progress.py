"""Progress of the part generation: a bar on a terminal, plain lines in a log.

A run whose output goes to a log (a scheduler, a Prefect worker, ``pqflow run ... > run.log``)
gets a line every few seconds, "12 of 24 parts generated (4 kept from the interrupted run), 35 s
elapsed, about 30 s remaining", instead of a minute of silence; on a terminal the rich progress
bar is drawn as before. The estimate of the time remaining uses only the parts generated in this
attempt (kept parts took no time).
"""

from __future__ import annotations

import sys
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import TextIO

__all__ = ["LineProgress", "StageLines", "ArtifactProgress", "progress_reporter", "stage_reporter", "format_seconds",
           "PROGRESS_INTERVAL_SECONDS"]

PROGRESS_INTERVAL_SECONDS = 5.0


def format_seconds(seconds: float) -> str:
    """``42`` -> ``"42 s"``, ``200`` -> ``"3 min 20 s"``, ``4000`` -> ``"1 h 6 min"``."""
    s = int(round(max(0.0, seconds)))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60} s"
    return f"{s // 3600} h {(s % 3600) // 60} min"


class LineProgress:
    """Plain progress lines: one at start, one every ``interval`` seconds from a background
    thread (also while no part finishes), one at the end.

    ``total`` parts in all, ``kept`` of them already done before this attempt. ``clock`` and
    ``stream`` are injectable for tests; :meth:`line` is the text of one line.
    """

    def __init__(
        self,
        total: int,
        kept: int = 0,
        *,
        interval: float = PROGRESS_INTERVAL_SECONDS,
        stream: TextIO | None = None,
        clock: Callable[[], float] = time.monotonic,
        what: str = "parts generated",
    ) -> None:
        self.total, self.kept, self.interval, self.what = int(total), int(kept), float(interval), what
        self._stream, self._clock = stream, clock
        self._new = 0
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._started = clock()

    @property
    def done(self) -> int:
        return self.kept + self._new

    def line(self) -> str:
        with self._lock:
            new, elapsed = self._new, self._clock() - self._started
        done = self.kept + new
        text = f"{done} of {self.total} {self.what}"
        if self.kept:
            text += f" ({self.kept} kept from the interrupted run)"
        text += f", {format_seconds(elapsed)} elapsed"
        left = self.total - done
        if left <= 0:
            return text
        if new == 0:
            return text + ", time remaining not known yet"
        return text + f", about {format_seconds(elapsed / new * left)} remaining"

    def emit(self) -> None:
        stream = self._stream if self._stream is not None else sys.stdout
        print(f"progress: {self.line()}", file=stream, flush=True)

    def advance(self, n: int = 1) -> None:
        with self._lock:
            self._new += n

    def _tick(self) -> None:
        while not self._stop.wait(self.interval):
            self.emit()

    def start(self) -> LineProgress:
        self._started = self._clock()
        self.emit()
        if self.interval > 0:
            self._thread = threading.Thread(target=self._tick, name="pqflow-progress", daemon=True)
            self._thread.start()
        return self

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)
        self.emit()

    def __enter__(self) -> LineProgress:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()


class StageLines(LineProgress):
    """Heartbeat lines for a step without parts to count (validation): "validating the written
    files, 15 s elapsed" every ``interval`` seconds, then "..., done in 21 s"."""

    def __init__(self, label: str, **kwargs) -> None:
        super().__init__(1, **kwargs)
        self.label = label

    def line(self) -> str:
        with self._lock:
            finished, elapsed = self._new > 0, self._clock() - self._started
        if finished:
            return f"{self.label}, done in {format_seconds(elapsed)}"
        return f"{self.label}, {format_seconds(elapsed)} elapsed"

    def stop(self) -> None:
        self.advance()
        super().stop()


@contextmanager
def stage_reporter(
    label: str, enabled: bool, *, terminal: bool | None = None, interval: float = PROGRESS_INTERVAL_SECONDS,
) -> Iterator[None]:
    """A spinner on a terminal, heartbeat lines in a log, nothing when not ``enabled``, while the
    block runs."""
    if not enabled:
        yield
        return
    if terminal is None:
        terminal = sys.stdout.isatty()
    if terminal:
        from rich.console import Console

        with Console().status(label):
            yield
        return
    with StageLines(label, interval=interval):
        yield


@contextmanager
def progress_reporter(
    total: int, kept: int, enabled: bool, *, terminal: bool | None = None, interval: float = PROGRESS_INTERVAL_SECONDS,
) -> Iterator[Callable[[], None]]:
    """Yield ``advance()``, called once per finished part: a rich bar when ``terminal`` (default:
    standard output is a terminal), plain lines every ``interval`` seconds otherwise, nothing
    when not ``enabled``."""
    if not enabled:
        yield lambda: None
        return
    if terminal is None:
        terminal = sys.stdout.isatty()
    if terminal:
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            Progress,
            TextColumn,
            TimeElapsedColumn,
            TimeRemainingColumn,
        )

        with Progress(
            TextColumn("[bold]generating scenario parts"), BarColumn(), MofNCompleteColumn(),
            TimeElapsedColumn(), TimeRemainingColumn(), transient=False,
        ) as bar:
            task = bar.add_task("parts", total=total, completed=kept)
            yield lambda: bar.advance(task)
        return
    with LineProgress(total, kept, interval=interval) as lines:
        yield lines.advance


class ArtifactProgress:
    """The same count as a Prefect progress artifact, a bar in the run's Artifacts tab of the
    Prefect UI (created and updated from inside a flow run)."""

    KEY = "pqflow-scenario-parts"

    def __init__(self, total: int, kept: int = 0) -> None:
        from prefect.artifacts import create_progress_artifact

        self.total, self.done = max(1, int(total)), int(kept)
        self.artifact_id = create_progress_artifact(
            progress=self.percent, key=self.KEY, description=f"scenario parts generated, of {self.total}",
        )

    @property
    def percent(self) -> float:
        return round(100.0 * self.done / self.total, 2)

    def advance(self) -> None:
        from prefect.artifacts import update_progress_artifact

        self.done += 1
        update_progress_artifact(self.artifact_id, progress=self.percent)  # type: ignore[arg-type]  # prefect: a sync call returns the UUID, its stub adds the coroutine
