"""The configuration side of the part plug-ins: ``[parts.<name>]`` sections validated by the
model the registered part kind names (:func:`pqflow.models.parts.register_part` fills this
table; the configuration layer sits below the models, so it holds only the schema classes)."""

from __future__ import annotations

from pydantic import BaseModel, ValidationError

__all__ = ["PART_SECTIONS", "register_part_section", "unregister_part_section", "validate_part_sections"]

#: section name -> the pydantic model of its ``[parts.<name>]`` table
PART_SECTIONS: dict[str, type[BaseModel]] = {}


def register_part_section(section: str, model: type[BaseModel]) -> None:
    """Make ``[parts.<section>]`` valid, checked by ``model``."""
    PART_SECTIONS[section] = model


def unregister_part_section(section: str) -> None:
    PART_SECTIONS.pop(section, None)


def validate_part_sections(raw: object) -> dict[str, BaseModel]:
    """Each ``[parts.<name>]`` table through its registered model; an unknown name or a table
    that is not a table raises ``ValueError`` naming ``parts.<name>``."""
    if raw is None:
        return {}
    if not isinstance(raw, dict):
        raise ValueError("[parts] must be a table of [parts.<name>] sections")
    out: dict[str, BaseModel] = {}
    for name, body in raw.items():
        model = PART_SECTIONS.get(name)
        if model is None:
            known = ", ".join(sorted(PART_SECTIONS)) or "none registered"
            raise ValueError(f"[parts.{name}]: no part kind named {name!r} (known: {known})")
        if isinstance(body, model):
            out[name] = body
        elif isinstance(body, dict):
            try:
                out[name] = model.model_validate(body)
            except ValidationError as exc:
                problems = "; ".join(
                    f"{'.'.join(str(x) for x in e['loc']) or '(table)'}: {e['msg']}" for e in exc.errors()
                )
                raise ValueError(f"[parts.{name}]: {problems}") from None
        else:
            raise ValueError(f"[parts.{name}] must be a table")
    return out
