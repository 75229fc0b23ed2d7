"""Reading a run configuration file, with errors that name the file and the key."""

from __future__ import annotations

import hashlib
import json
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from pqflow.config.schema import RunConfig
from pqflow.errors import ConfigError

__all__ = ["load_config", "parse_config", "config_hash", "apply_overrides"]


def _key_path(loc: tuple[Any, ...]) -> str:
    parts: list[str] = []
    for item in loc:
        if isinstance(item, int):
            parts[-1] = f"{parts[-1]}[{item}]" if parts else f"[{item}]"
        else:
            parts.append(str(item))
    return ".".join(parts) or "(top level)"


def _describe(err: Mapping[str, Any]) -> str:
    kind = err.get("type", "")
    msg = str(err.get("msg", "invalid value"))
    if kind == "extra_forbidden":
        return "unknown key (not part of the configuration schema; check its spelling)"
    if kind == "missing":
        return "missing key (required)"
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    if "input" in err and kind not in ("model_type", "dict_type"):
        return f"{msg}{_got(err['input'])}"
    return msg


def _got(value: Any) -> str:
    """The offending value, briefly: a cross-field rule's input is a whole table (or the whole
    configuration), which its message already names by key, so it is not echoed."""
    if isinstance(value, dict):
        return ""
    text = repr(value)
    return f" (got {text if len(text) <= 80 else text[:77] + '...'})"


def parse_config(data: dict[str, Any], *, source: str, base_dir: str | Path | None = None) -> RunConfig:
    """Validate ``data`` (the parsed TOML); ``source`` names it in every error message;
    ``base_dir`` is where relative market-data paths are read from."""
    try:
        config = RunConfig.model_validate(data)
        config._base_dir = Path(base_dir) if base_dir is not None else Path(".")
        return config
    except ValidationError as exc:
        lines = [f"{source}: {_key_path(tuple(e['loc']))}: {_describe(e)}" for e in exc.errors()]
        if len(lines) == 1:  # one problem, one line
            raise ConfigError(f"invalid run configuration: {lines[0]}") from None
        raise ConfigError("invalid run configuration\n  " + "\n  ".join(lines)) from None


def load_config(path: str | Path) -> RunConfig:
    """Read and validate a TOML run configuration."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"{path}: configuration file not found") from None
    except OSError as exc:
        raise ConfigError(f"{path}: cannot read the configuration ({exc.strerror})") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{path}: not valid TOML: {exc}") from None
    return parse_config(data, source=str(path), base_dir=path.parent)


def apply_overrides(
    config: RunConfig, *, scenarios: int | None = None, seed: int | None = None, source: str
) -> RunConfig:
    """The command line's ``--scenarios`` / ``--seed``, validated like the file itself."""
    data = config.model_dump(exclude_none=True)  # Python types: strict validation takes them back
    if scenarios is not None:
        data["simulation"]["scenarios"] = scenarios
        data["simulation"]["batch_size"] = min(data["simulation"]["batch_size"], scenarios)
    if seed is not None:
        data["simulation"]["seed"] = seed
    return parse_config(data, source=f"{source} (with command-line overrides)", base_dir=config.base_dir)


def config_hash(config: RunConfig) -> str:
    """sha256 of the validated configuration in canonical JSON: equal runs, equal hashes."""
    data = config.model_dump(mode="json")
    data.pop("signoff", None)  # names for the report's sign-off page: not an input of the run
    canon = json.dumps(data, sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(canon.encode("utf-8")).hexdigest()
