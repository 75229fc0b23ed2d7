"""Market inputs: today's risk-free curve."""

from __future__ import annotations

from pqflow.market.curve import DiscountCurve, LogDiscountCurve

__all__ = ["DiscountCurve", "LogDiscountCurve"]
