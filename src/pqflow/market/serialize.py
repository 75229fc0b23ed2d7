"""Curves to and from the plain JSON kept in ``calibration.json``.

A stored curve is rebuilt exactly (the same numbers, hence the same discount factors), so a run
from a stored calibration uses the very curve the calibration fitted.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from pqflow.market.curve import DiscountCurve, LogDiscountCurve
from pqflow.market.last_liquid_forward import LastLiquidForwardCurve
from pqflow.market.smith_wilson import SmithWilsonCurve

__all__ = ["curve_to_json", "curve_from_json"]


def curve_to_json(curve: DiscountCurve) -> dict[str, Any]:
    if isinstance(curve, LogDiscountCurve):
        return {
            "kind": "log_discount_pchip",
            "description": "monotone cubic (PCHIP) interpolation of -ln P(0,t) through the pillars, node (0, 0)",
            "maturities": curve.maturities.tolist(),
            "discount_factors": curve.discount_factors.tolist(),
        }
    if isinstance(curve, SmithWilsonCurve):
        return {
            "kind": "smith_wilson",
            "description": "P(t) = exp(-omega t) + sum_j zeta_j W(t, u_j), omega = ln(1 + UFR)",
            "ultimate_forward_rate": curve.ultimate_forward_rate,
            "alpha": curve.alpha,
            "nodes": curve.nodes.tolist(),
            "weights": curve.weights.tolist(),
            "long_end": curve.long_end,
        }
    if isinstance(curve, LastLiquidForwardCurve):
        return {
            "kind": "last_liquid_forward",
            "description": "-ln P(0,t) linear between (0, 0) and the knots (constant forwards) up to the first "
            "smoothing point t_F, beyond it -ln P(t_F) + omega h + (LLFR - omega)(1 - exp(-alpha h))/alpha, "
            "h = t - t_F, omega = ln(1 + UFR), LLFR continuously compounded",
            "first_smoothing_point": curve.first_smoothing_point,
            "last_liquid_forward_rate": curve.last_liquid_forward_rate,
            "ultimate_forward_rate": curve.ultimate_forward_rate,
            "alpha": curve.alpha,
            "knots": curve.knots.tolist(),
            "log_discounts": curve.log_discounts.tolist(),
            "long_end": curve.long_end,
        }
    raise TypeError(f"cannot store a curve of type {type(curve).__name__}")


def curve_from_json(data: dict[str, Any]) -> DiscountCurve:
    kind = data.get("kind", "log_discount_pchip")
    if kind == "log_discount_pchip":
        return LogDiscountCurve(
            maturities=np.array(data["maturities"], dtype=float),
            discount_factors=np.array(data["discount_factors"], dtype=float),
        )
    if kind == "smith_wilson":
        return SmithWilsonCurve(
            ultimate_forward_rate=float(data["ultimate_forward_rate"]),
            alpha=float(data["alpha"]),
            nodes=np.array(data["nodes"], dtype=float),
            weights=np.array(data["weights"], dtype=float),
            long_end=float(data["long_end"]),
        )
    if kind == "last_liquid_forward":
        curve = LastLiquidForwardCurve(
            knots=np.array(data["knots"], dtype=float),
            log_discounts=np.array(data["log_discounts"], dtype=float),
            last_liquid_forward_rate=float(data["last_liquid_forward_rate"]),
            ultimate_forward_rate=float(data["ultimate_forward_rate"]),
            alpha=float(data["alpha"]),
            long_end=float(data["long_end"]),
        )
        if abs(curve.first_smoothing_point - float(data["first_smoothing_point"])) > 1e-12:
            raise ValueError("stored first_smoothing_point is not the last knot")
        return curve
    raise ValueError(f"unknown stored curve kind {kind!r}")
