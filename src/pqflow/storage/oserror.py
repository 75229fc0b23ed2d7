"""Write errors that name their file: pyarrow reports a full disk as ``OSError`` without a
file name, so the message a user reads would not say where."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["naming"]


@contextmanager
def naming(path: str | Path) -> Iterator[None]:
    """Re-raise an ``OSError`` from the block with ``path`` as its file name if it has none."""
    try:
        yield
    except OSError as exc:
        if exc.filename is None and exc.errno is not None:
            raise OSError(exc.errno, exc.strerror or str(exc), str(path)) from exc
        raise
