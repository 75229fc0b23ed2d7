"""A validated configuration written back as TOML (what ``compare --attribute`` runs from).

Only what a run configuration holds: tables, sub-tables, arrays of tables, strings, numbers,
booleans, dates (as ISO strings, which the schema reads back) and lists of these. Keys whose
value is ``None`` are left out (TOML has no null; the schema's default is ``None``).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

__all__ = ["dump_toml", "write_config_toml"]


def _value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)  # a JSON string is a valid TOML basic string
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError(f"{v} cannot be written to a configuration")
        return repr(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v if x is not None) + "]"
    if hasattr(v, "isoformat"):
        return json.dumps(v.isoformat())
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def _is_tables(v: Any) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def _key(k: str) -> str:
    return k if k.replace("_", "").replace("-", "").isalnum() else json.dumps(k)


def dump_toml(data: dict[str, Any]) -> str:
    lines: list[str] = []

    def table(name: str, body: dict[str, Any], header: str) -> None:
        lines.append(header)
        for k, v in body.items():
            if v is not None and not isinstance(v, dict) and not _is_tables(v):
                lines.append(f"{_key(k)} = {_value(v)}")
        lines.append("")
        for k, v in body.items():
            if isinstance(v, dict):
                table(f"{name}.{_key(k)}", v, f"[{name}.{_key(k)}]")
            elif _is_tables(v):
                for item in v:
                    table(f"{name}.{_key(k)}", item, f"[[{name}.{_key(k)}]]")

    for section, body in data.items():
        if body is None:
            continue
        if _is_tables(body):
            for item in body:
                table(_key(section), item, f"[[{_key(section)}]]")
        elif isinstance(body, dict):
            table(_key(section), body, f"[{_key(section)}]")
        elif isinstance(body, list) and not body:
            continue
        else:
            raise ValueError(f"top-level key {section!r} must be a table")
    return "\n".join(lines)


def write_config_toml(path: str | Path, data: dict[str, Any]) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(dump_toml(data), encoding="utf-8")
    return path
