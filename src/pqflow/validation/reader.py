"""Kept for imports from earlier versions: the reader is :class:`pqflow.storage.scenario_set.ScenarioSet`
(formats belong to :mod:`pqflow.storage`)."""

from __future__ import annotations

from pqflow.storage.scenario_set import ScenarioSet

ScenarioSetReader = ScenarioSet

__all__ = ["ScenarioSetReader"]
