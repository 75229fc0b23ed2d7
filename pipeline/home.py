"""Prefect's home folder, kept private.

Prefect reads its profiles (which API to talk to) and keeps its database in ``PREFECT_HOME``.
By default pqflow puts it in the system's temporary directory, which every user shares, so a
folder found there is trusted only if this user owns it and nobody else can write to it:
otherwise another user could have placed a profile that points the run at their server. The
same rules apply to a ``PREFECT_HOME`` set by the caller. Prefect-free, so it can run before
Prefect reads anything.
"""

from __future__ import annotations

import os
import stat
import tempfile
from pathlib import Path

from pqflow.errors import RuntimeFault

__all__ = ["default_prefect_home", "make_private_dir", "check_prefect_home"]

_PROFILES = "profiles.toml"


def default_prefect_home() -> Path:
    uid = os.getuid() if hasattr(os, "getuid") else "user"
    return Path(tempfile.gettempdir()) / f"pqflow-prefect-{uid}"


def make_private_dir(path: Path) -> None:
    """Create ``path`` readable, writable and searchable by its owner only (0700), if absent."""
    try:
        path.mkdir(mode=0o700, parents=False)
    except FileExistsError:
        pass
    except FileNotFoundError:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.mkdir(mode=0o700, exist_ok=True)


def _unsafe(path: Path, what: str) -> str | None:
    """Why ``path`` cannot be trusted, or None."""
    st = os.lstat(path)
    if stat.S_ISLNK(st.st_mode):
        return f"{what} {path} is a symbolic link"
    if st.st_uid != os.getuid():
        return f"{what} {path} belongs to another user (uid {st.st_uid}, you are {os.getuid()})"
    if st.st_mode & (stat.S_IWGRP | stat.S_IWOTH):
        return f"{what} {path} can be written by other users (mode {stat.S_IMODE(st.st_mode):04o})"
    return None


def check_prefect_home(path: str | Path | None = None) -> Path:
    """Create Prefect's home with owner-only permissions if it is absent; refuse one that is a
    link, belongs to another user or can be written by others (``RuntimeFault`` naming it).
    ``path`` defaults to ``PREFECT_HOME`` (else the per-user folder in the temporary dir)."""
    home = Path(path if path is not None else os.environ.get("PREFECT_HOME") or default_prefect_home())
    if not hasattr(os, "getuid"):  # no owners to check on this platform
        home.mkdir(parents=True, exist_ok=True)
        return home
    make_private_dir(home)
    problem = _unsafe(home, "Prefect home folder")
    if problem is None and not home.is_dir():
        problem = f"Prefect home {home} is not a folder"
    if problem is None and os.path.lexists(home / _PROFILES):
        problem = _unsafe(home / _PROFILES, "Prefect profile file")
    if problem is not None:
        raise RuntimeFault(
            f"{problem}; it could point Prefect at another server, so pqflow will not use it. "
            "Remove it, or set PREFECT_HOME to a folder of your own that only you can write to"
        )
    return home
