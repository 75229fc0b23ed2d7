"""How the command line ends: exit codes, one-line ``error:`` messages, interruptions.

    0    every check passed (or was inconclusive)
    1    the run was written but a check failed (or a valuation's two sets differ)
    2    bad input: configuration, market data, run directory, manifest; nothing written
    3    runtime fault: disk full, permissions, I/O error, unsafe Prefect home; nothing written
         or lost (a partial run stays in its staging folder for ``--resume``)
    130  interrupted (Ctrl-C, SIGINT); 143 terminated (SIGTERM)

Every message is printed literally (text from files, paths and configurations may hold square
brackets, which the terminal library would otherwise read as markup).
"""

from __future__ import annotations

import errno
import functools
import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any, TypeVar

import typer
from rich.console import Console
from rich.text import Text

from pqflow.errors import PqflowError, RuntimeFault

__all__ = [
    "EXIT_OK", "EXIT_CHECK_FAILED", "EXIT_BAD_INPUT", "EXIT_RUNTIME", "EXIT_INTERRUPTED",
    "error_line", "exit_code_for", "message_for", "describe_os_error", "guarded", "terminate_as_interrupt",
]

EXIT_OK = 0
EXIT_CHECK_FAILED = 1
EXIT_BAD_INPUT = 2
EXIT_RUNTIME = 3
EXIT_INTERRUPTED = 130  # 128 + SIGINT, as shells report it

F = TypeVar("F", bound=Callable[..., Any])


def error_line(message: str) -> Text:
    """``error: MESSAGE`` with the message taken literally (no markup)."""
    return Text.assemble(("error:", "bold red"), " ", str(message))


def exit_code_for(exc: BaseException) -> int:
    if isinstance(exc, (RuntimeFault, OSError)):
        return EXIT_RUNTIME
    return EXIT_BAD_INPUT


_HINTS = {
    errno.ENOSPC: "no space left on the device; free space or choose another location",
    errno.EDQUOT: "disk quota exceeded; free space or choose another location",
    errno.EACCES: "permission denied",
    errno.EPERM: "operation not permitted",
    errno.EROFS: "the file system is read-only",
}


def describe_os_error(exc: OSError) -> str:
    """One line naming the file and what the system said."""
    what = _HINTS.get(exc.errno or -1, exc.strerror or str(exc) or type(exc).__name__)
    where = exc.filename if exc.filename is not None else None
    if where is None:
        text = str(exc)
        return f"{what} ({text})" if text and text != what else what
    return f"{where}: {what}"


def message_for(exc: BaseException) -> str:
    """The text of the ``error:`` line for ``exc``."""
    if isinstance(exc, OSError):
        return describe_os_error(exc) + "; earlier output is untouched"
    return str(exc)


def _print_error(console: Console, exc: BaseException) -> None:
    console.print(error_line(message_for(exc)), highlight=False, soft_wrap=True)


def guarded(console: Console) -> Callable[[F], F]:
    """Decorator for a command: a pqflow error exits 2 (3 for a runtime fault), an ``OSError``
    (disk full, permissions) exits 3 and Ctrl-C exits 130, each with one ``error:`` line and no
    traceback."""

    def wrap(fn: F) -> F:
        @functools.wraps(fn)
        def inner(*args: Any, **kwargs: Any) -> Any:
            try:
                return fn(*args, **kwargs)
            except (PqflowError, OSError) as exc:
                _print_error(console, exc)
                raise typer.Exit(code=exit_code_for(exc)) from None
            except KeyboardInterrupt:
                console.print(error_line("interrupted"), highlight=False)
                raise typer.Exit(code=interrupt_exit_code()) from None

        return inner  # type: ignore[return-value]

    return wrap


_received: list[int] = []


def interrupt_exit_code() -> int:
    """128 + the signal that interrupted the command (SIGINT unless SIGTERM arrived)."""
    return 128 + (_received[-1] if _received else int(signal.SIGINT))


def _on_terminate(signum: int, frame: Any) -> None:
    _received.append(signum)
    raise KeyboardInterrupt


@contextmanager
def terminate_as_interrupt() -> Iterator[None]:
    """While the block runs, SIGTERM unwinds it like Ctrl-C (``finally`` blocks run: the lock
    is released and the temporary Prefect server stopped) instead of killing the process."""
    _received.clear()
    try:
        before = signal.signal(signal.SIGTERM, _on_terminate)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, before)
