"""Prefect flows that compose the pqflow library into the quarterly job.

Importing this package sets quiet, self-contained Prefect defaults (unless the caller set them):
local mode with a temporary API server, its home in a per-user temporary folder rather than the
user's home, telemetry off (offline it only prints errors) and Prefect's own log lines at
WARNING.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def _prefect_defaults() -> None:
    home = Path(tempfile.gettempdir()) / f"pqflow-prefect-{os.getuid() if hasattr(os, 'getuid') else 'user'}"
    if "PREFECT_HOME" not in os.environ:
        home.mkdir(mode=0o700, parents=True, exist_ok=True)  # owner only; checked by pipeline.home
        os.environ["PREFECT_HOME"] = str(home)
    os.environ.setdefault("PREFECT_SERVER_ANALYTICS_ENABLED", "false")
    os.environ.setdefault("DO_NOT_TRACK", "1")
    os.environ.setdefault("PREFECT_LOGGING_LEVEL", "WARNING")
    os.environ.setdefault("PREFECT_LOGGING_LOGGERS_PREFECT_TASK_RUNS_LEVEL", "WARNING")
    os.environ.setdefault("PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS", "90")


_prefect_defaults()

from pqflow.pipeline.flows import quarterly_run, run_in_process, run_quarterly  # noqa: E402

__all__ = ["quarterly_run", "run_in_process", "run_quarterly"]
