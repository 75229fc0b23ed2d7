"""Sensitivity and stress sets: shocked market data, their calibration, and what a run writes
for them under ``sensitivities/<name>/`` (same layout as the base run, same seeds)."""

__all__: list[str] = []  # the package re-exports nothing: import from its modules
