"""The temporary Prefect API server of one run, tied to the process that started it.

Prefect starts its temporary server (uvicorn) as a plain child process: in the terminal's
process group, so Ctrl-C kills it mid-run and the run then retries a dead server, and not tied
to its parent, so after ``kill -9`` it keeps listening on a loopback port. :class:`TiedServer`
starts the same command (the one in ``prefect.server.api.server.SubprocessASGIServer``) with
two differences:

- in a session of its own (``start_new_session``): a Ctrl-C meant for the run does not reach
  it, and the run stops it itself on the way out;
- through a few lines that first ask Linux to kill it when its parent dies
  (``prctl(PR_SET_PDEATHSIG, SIGKILL)``, kept across ``exec``), and exit at once if the parent
  is already gone; then they ``exec`` uvicorn. So it cannot outlive the run, whatever ends the
  run. The run starts it from its main thread (the signal follows the thread that forked).
"""

from __future__ import annotations

import os
import subprocess
import sys
from typing import Any

import prefect
from prefect.server.api.server import SubprocessASGIServer
from prefect.settings import get_current_settings

__all__ = ["TiedServer", "LAUNCHER"]

#: Run as ``python -c LAUNCHER PARENT_PID ARGV...``: die with the parent, then become ARGV.
LAUNCHER = """
import os, sys
parent = int(sys.argv[1])
if sys.platform.startswith("linux"):
    import ctypes, signal
    ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGKILL), 0, 0, 0)  # PR_SET_PDEATHSIG
if os.getppid() != parent:
    os._exit(1)
os.execv(sys.argv[2], sys.argv[2:])
"""


class TiedServer(SubprocessASGIServer):
    """Prefect's temporary API server, in its own session and killed with its parent."""

    def _run_uvicorn_command(self) -> subprocess.Popen[Any]:
        server_env = {"PREFECT_UI_ENABLED": "0", "PREFECT__SERVER_EPHEMERAL": "1", "PREFECT__SERVER_FINAL": "1"}
        command = [
            sys.executable, "-m", "uvicorn",
            "--app-dir", str(prefect.__module_path__.parent),
            "--factory", "prefect.server.api.server:create_app",
            "--host", "127.0.0.1", "--port", str(self.port),
            "--log-level", "error", "--lifespan", "on",
        ]
        return subprocess.Popen(
            args=[sys.executable, "-c", LAUNCHER, str(os.getpid()), *command],
            env={**os.environ, **server_env, **get_current_settings().to_environment_variables(exclude_unset=True)},
            start_new_session=True,
        )
