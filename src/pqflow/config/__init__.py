"""The run configuration: schema, loading and clear errors."""

from __future__ import annotations

from pqflow.config.loader import apply_overrides, config_hash, load_config, parse_config
from pqflow.config.schema import RunConfig

__all__ = ["RunConfig", "apply_overrides", "config_hash", "load_config", "parse_config"]
