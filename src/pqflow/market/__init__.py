"""Market inputs: today's risk-free curve."""

from __future__ import annotations

from pqflow.market import last_liquid_forward as _last_liquid_forward  # noqa: F401  registers the method
from pqflow.market.curve import DiscountCurve, LogDiscountCurve

__all__ = ["DiscountCurve", "LogDiscountCurve"]
